"""Scores and the statistics around them: chance levels, spreads, block permutation tests
(also of choosing the best of several models), participant bootstrap intervals, the
corrected resampled t-test and Holm's adjustment.

Scores are computed as :mod:`sklearn.metrics` computes them (the same formulas, on the same
confusion matrices, summed in the same order, so the values are equal to the last bit; the
tests compare them with scikit-learn's functions), from labels encoded once as class indices:
scikit-learn's own functions re-check string labels on every call, which dominated a
training evaluation. Undefined values follow scikit-learn: a recall or F1 whose denominator is
zero is 0 (``zero_division=0``; look at ``support`` to tell such a 0 from a real one) and
Cohen's kappa is NaN when both raters put every row in one class.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import stats

METRICS = ("accuracy", "balanced_accuracy", "macro_f1", "kappa")
FEW_FOLDS = 10
_FEW_FOLDS_CAUTION = (
    "too few folds for a meaningful test: with fewer than 10 fold differences the corrected "
    "t-test has little power and its p-value is unstable; report the differences themselves"
)


# --------------------------------------------------------------------------- helpers


def _as_1d(values, field):
    arr = np.asarray(values)
    if arr.ndim != 1:
        raise ValueError(f"{field} must be one value per row (1-D), got shape {arr.shape}")
    return arr


def _pair(y_true, y_pred, labels):
    y_true, y_pred, labels, _, _ = _encoded_pair(y_true, y_pred, labels)
    return y_true, y_pred, labels


def _encoded_pair(y_true, y_pred, labels):
    """Checked (y_true, y_pred, labels) with the class index of every y_true and y_pred."""
    y_true = _as_1d(y_true, "y_true")
    y_pred = _as_1d(y_pred, "y_pred")
    if y_true.shape != y_pred.shape:
        raise ValueError(
            f"y_true and y_pred must have the same length, got {y_true.size} and {y_pred.size}")
    if y_true.size == 0:
        raise ValueError("y_true is empty; scores need at least one row")
    labels = _labels(labels)
    return (y_true, y_pred, labels, _codes(y_true, labels, "y_true"),
            _codes(y_pred, labels, "y_pred"))


def _labels(labels):
    if labels is None:
        raise ValueError("labels is missing; pass the list of all classes, in report order")
    labels = np.asarray(list(labels))
    if labels.ndim != 1 or labels.size < 2:
        raise ValueError("labels must list at least 2 classes")
    if np.unique(labels).size != labels.size:
        raise ValueError(f"labels contains duplicates: {[_plain(v) for v in labels]}")
    return labels


def _plain(value):
    """numpy scalar -> Python scalar (for dict keys and JSON)."""
    return value.item() if isinstance(value, np.generic) else value


def _metric_from_confusion(cm: np.ndarray, metric: str) -> np.ndarray:
    """``metric`` from confusion matrices ``cm`` (..., K, K; rows true, columns predicted).

    Same definitions as scikit-learn: balanced accuracy averages the recall of the classes
    present in y_true; macro F1 averages F1 over the classes present in y_true or y_pred
    (scikit-learn's default label set); kappa is NaN when the expected agreement is 1.
    """
    cm = np.asarray(cm, dtype=float)
    tp = np.diagonal(cm, axis1=-2, axis2=-1)
    true_n = cm.sum(axis=-1)
    pred_n = cm.sum(axis=-2)
    total = true_n.sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        if metric == "accuracy":
            return tp.sum(axis=-1) / total
        if metric == "balanced_accuracy":
            present = true_n > 0
            recall = np.where(present, tp / np.where(present, true_n, 1.0), 0.0)
            return recall.sum(axis=-1) / present.sum(axis=-1)
        if metric == "macro_f1":
            present = (true_n + pred_n) > 0
            denom = true_n + pred_n  # 2 tp + fp + fn
            f1 = np.where(present, 2.0 * tp / np.where(present, denom, 1.0), 0.0)
            return f1.sum(axis=-1) / present.sum(axis=-1)
        if metric == "kappa":
            observed = tp.sum(axis=-1) / total
            expected = (true_n * pred_n).sum(axis=-1) / total**2
            return np.where(1.0 - expected <= 1e-12, np.nan,
                            (observed - expected) / (1.0 - expected))
    raise ValueError(f"metric must be one of {', '.join(METRICS)}, got {metric!r}")


def _codes(values, labels, field):
    """Index of each value in ``labels`` (ValueError naming ``field`` for unknown values)."""
    sorter = np.argsort(labels, kind="stable")
    pos = np.searchsorted(labels, values, sorter=sorter)
    pos = np.minimum(pos, labels.size - 1)
    codes = sorter[pos]
    bad = labels[codes] != values
    if np.any(bad):
        raise ValueError(f"{field} contains {_plain(values[bad][0])!r}, which is not in labels "
                         f"{[_plain(v) for v in labels]}; pass every class in labels")
    return codes


def _confusion(y_true, y_pred, labels):
    """Confusion counts (rows true, columns predicted, in ``labels`` order), in numpy: the
    permutation test computes thousands, and sklearn's input checks dominate at this size."""
    k = labels.size
    flat = _codes(y_true, labels, "y_true") * k + _codes(y_pred, labels, "y_pred")
    return np.bincount(flat, minlength=k * k).reshape(k, k)


def _metric_fn(metric, labels) -> Callable:
    """A function (y_true, y_pred) -> float for a metric name or callable."""
    if callable(metric):
        return metric
    if metric not in METRICS:
        raise ValueError(f"metric must be one of {', '.join(METRICS)} or a callable, "
                         f"got {metric!r}")

    def score(y_true, y_pred):
        y_true, y_pred = np.asarray(y_true), np.asarray(y_pred)
        # every predicted class must be a column of the confusion matrix
        extra = np.setdiff1d(np.unique(y_pred), labels)
        labs = np.concatenate([labels, extra]) if extra.size else labels
        return float(_metric_from_confusion(_confusion(y_true, y_pred, labs), metric))

    return score


# --------------------------------------------------------------------------- scores


def _scores_of_codes(t_idx: np.ndarray, p_idx: np.ndarray, labels: np.ndarray,
                     order: np.ndarray) -> dict:
    """:func:`scores` from class indices into ``labels``; ``order`` sorts ``labels``.

    Each value is computed with scikit-learn's formula and summation order (1.9): accuracy
    is the share of equal pairs; balanced accuracy the mean, over the classes present in
    y_true in sorted order, of diag / row sum; macro F1 the mean, over the classes present
    in y_true or y_pred in sorted order, of 2 tp / (true + predicted); kappa is
    1 - sum(w * C) / sum(w * E) on the confusion matrix in ``labels`` order, with w = 1 off
    the diagonal and E the outer product of the column and row sums over the total, NaN
    when that denominator is 0.
    """
    k = labels.size
    n = int(t_idx.size)
    cm = np.bincount(t_idx * k + p_idx, minlength=k * k).reshape(k, k)
    tp = np.diagonal(cm)
    true_n = cm.sum(axis=1)
    pred_n = cm.sum(axis=0)
    # sorted label order, as scikit-learn's unique_labels gives without ``labels``
    cm_sorted = cm[np.ix_(order, order)].astype(float)
    tp_s, true_s, pred_s = tp[order], true_n[order], pred_n[order]
    with np.errstate(divide="ignore", invalid="ignore"):
        per_class = np.diagonal(cm_sorted) / cm_sorted.sum(axis=1)
    balanced = float(np.mean(per_class[~np.isnan(per_class)]))
    present = (true_s + pred_s) > 0
    f1 = (2.0 * tp_s[present].astype(float)) / (1.0 * true_s[present].astype(float)
                                                 + pred_s[present].astype(float))
    macro_f1 = float(np.average(f1))
    confusion = cm.astype(float)
    sum0 = np.sum(confusion, axis=0)
    sum1 = np.sum(confusion, axis=1)
    total = np.sum(sum0)
    kappa = math.nan
    if total != 0:
        weights = np.ones((k, k))
        np.fill_diagonal(weights, 0)
        denominator = np.sum(weights * (np.outer(sum0, sum1) / total))
        if denominator != 0:
            kappa = float(1 - np.sum(weights * confusion) / denominator)
    safe = np.where(true_n > 0, true_n, 1).astype(float)
    recall = np.where(true_n > 0, tp / safe, 0.0)
    return {
        "accuracy": float(np.average(t_idx == p_idx)),
        "balanced_accuracy": balanced,
        "macro_f1": macro_f1,
        "kappa": kappa,
        "confusion": cm.tolist(),
        "recall": {_plain(lab): float(r) for lab, r in zip(labels, recall, strict=True)},
        "support": {_plain(lab): int(c) for lab, c in zip(labels, true_n, strict=True)},
        "n": n,
    }


def scores(y_true, y_pred, *, labels) -> dict:
    """Accuracy, balanced accuracy, macro F1, Cohen's kappa, per-class recall and the
    confusion matrix (rows true, columns predicted, in ``labels`` order), equal to
    scikit-learn's ``accuracy_score``, ``balanced_accuracy_score``, ``f1_score(average=
    "macro", zero_division=0)``, ``cohen_kappa_score(labels=labels)``, ``recall_score(
    labels=labels, average=None, zero_division=0)`` and ``confusion_matrix(labels=labels)``.

    ``balanced_accuracy`` and ``macro_f1`` use scikit-learn's defaults (classes present in
    y_true, resp. in y_true or y_pred); ``recall`` lists every label, 0 where the label has no
    true rows (see ``support``); ``kappa`` is NaN when undefined.
    """
    _, _, labels, t_idx, p_idx = _encoded_pair(y_true, y_pred, labels)
    return _scores_of_codes(t_idx, p_idx, labels, np.argsort(labels, kind="stable"))


def per_site(y_true, y_pred, sites, *, labels) -> dict:
    """:func:`scores` for each site's rows, keyed by site (sorted); labels encoded once."""
    y_true, _, labels, t_idx, p_idx = _encoded_pair(y_true, y_pred, labels)
    sites = _as_1d(sites, "sites")
    if sites.size != y_true.size:
        raise ValueError(f"sites must have one value per row ({y_true.size}), got {sites.size}")
    order = np.argsort(labels, kind="stable")
    site_ids, site_of_row = np.unique(sites, return_inverse=True)
    return {_plain(site): _scores_of_codes(t_idx[site_of_row == i], p_idx[site_of_row == i],
                                           labels, order)
            for i, site in enumerate(site_ids)}


def chance_level(y, *, labels) -> dict:
    """The scores a classifier reaches without learning anything from the features.

    Balanced accuracy: a classifier that always answers one class has recall 1 on that class
    and 0 on the others, and one that guesses at random (with any class probabilities) has
    expected recall p_k on class k; either way the mean recall over K classes is 1/K, whatever
    the class sizes. Accuracy: always answering the most frequent class scores that class's
    share of the rows, which is what an accuracy must beat when classes are unbalanced.
    """
    y = _as_1d(y, "y")
    labels = _labels(labels)
    if y.size == 0:
        raise ValueError("y is empty; the chance level needs the labels of the rows")
    counts = np.bincount(_codes(y, labels, "y"), minlength=labels.size)
    return {"balanced_accuracy": 1.0 / labels.size, "accuracy": float(counts.max() / y.size)}


def summarise(values) -> dict:
    """Mean with its spread: ``{"mean", "sd" (ddof=1, None if n < 2), "min", "max", "n",
    "n_missing"}``; NaN values (e.g. an undefined kappa) are left out and counted in
    ``n_missing``; with no finite value every statistic is None."""
    arr = np.asarray(list(values) if not isinstance(values, np.ndarray) else values,
                     dtype=float).ravel()
    finite = arr[~np.isnan(arr)]
    n = int(finite.size)
    if n == 0:
        return {"mean": None, "sd": None, "min": None, "max": None, "n": 0,
                "n_missing": int(arr.size)}
    return {
        "mean": float(finite.mean()),
        "sd": float(finite.std(ddof=1)) if n >= 2 else None,
        "min": float(finite.min()),
        "max": float(finite.max()),
        "n": n,
        "n_missing": int(arr.size - n),
    }


# --------------------------------------------------------------------------- permutation test


def _block_design(y, blocks, participants):
    """(block label per block, block index per row) after checking that every block has one
    label and one participant."""
    y = _as_1d(y, "y")
    blocks = _as_1d(blocks, "blocks")
    participants = _as_1d(participants, "participants")
    if not (y.size == blocks.size == participants.size):
        raise ValueError(f"y, blocks and participants must have one value per row; got "
                         f"{y.size}, {blocks.size} and {participants.size}")
    if y.size == 0:
        raise ValueError("y is empty; the permutation test needs rows")
    block_ids, block_of_row = np.unique(blocks.astype(str), return_inverse=True)
    block_label = np.empty(block_ids.size, dtype=y.dtype)
    for b, block in enumerate(block_ids):
        rows = block_of_row == b
        values = np.unique(y[rows])
        if values.size != 1:
            raise ValueError(
                f"block {str(block)!r} has more than one label ({', '.join(map(str, values))}); "
                "blocks must be label-constant (use recordings or condition blocks as blocks)")
        owners = np.unique(participants[rows])
        if owners.size != 1:
            raise ValueError(
                f"block {str(block)!r} spans participants {', '.join(map(str, owners))}; "
                "a block must belong to one participant")
        block_label[b] = values[0]
    if block_ids.size < 2:
        raise ValueError("blocks: the permutation test needs at least 2 blocks")
    return block_label, block_of_row


def _check_count(n_permutations):
    if isinstance(n_permutations, bool) or not isinstance(n_permutations, int | np.integer) \
            or n_permutations < 1:
        raise ValueError(f"n_permutations must be a positive integer, got {n_permutations!r}")
    return int(n_permutations)


def smallest_p(n_permutations) -> float:
    """The smallest p-value ``n_permutations`` permutations can give: 1 / (n + 1)."""
    return 1.0 / (1.0 + _check_count(n_permutations))


def _p(null, observed):
    n_ge = int(np.sum(null >= observed - 1e-12))  # ties count against the observed score
    return (1.0 + n_ge) / (1.0 + null.size)


def block_permutation_test(predict_fn: Callable, y, blocks, participants, *,
                           n_permutations: int = 200, seed: int = 0,
                           metric: str | Callable = "balanced_accuracy", observed=None,
                           labels=None) -> dict:
    """Permutation test of a whole cross-validation, permuting labels block by block.

    ``y`` must be constant within each block (e.g. a recording or a condition block of one
    participant); each permutation shuffles the block labels across blocks and gives every
    window its block's new label, so windows of a block stay together and the participant
    grouping (which rows belong to whom, hence the caller's folds) is unchanged.
    ``predict_fn(y_permuted) -> y_pred`` runs the caller's whole cross-validation on the
    permuted labels and returns out-of-fold predictions for every row. ``observed`` is the
    score on the true labels (computed with ``predict_fn(y)`` when not given).

    p = (1 + #{null >= observed}) / (1 + n_permutations) (Phipson & Smyth 2010): never 0,
    at least ``1 / (1 + n_permutations)`` (``min_p_value``). Returns ``{"p_value",
    "min_p_value", "observed", "null_mean", "null_sd", "n_permutations", "n_blocks",
    "null"}``.
    """
    out = selection_permutation_test(lambda y_perm, _k: predict_fn(y_perm), y, blocks,
                                     participants, n_models=1, chosen=0,
                                     n_permutations=n_permutations, seed=seed, metric=metric,
                                     observed=observed, labels=labels)
    for key in ("naive_p_value", "n_models", "n_fitted", "n_stopped_early"):
        out.pop(key)
    return out


def selection_permutation_test(predict_model: Callable, y, blocks, participants, *, n_models: int,
                               chosen: int, n_permutations: int = 200, seed: int = 0,
                               metric: str | Callable = "balanced_accuracy", observed=None,
                               labels=None, scored=None, stop_early: bool = True) -> dict:
    """Permutation test of choosing the best of several models, permuting whole blocks.

    ``predict_model(y_permuted, k)`` runs candidate ``k``'s whole cross-validation on the
    given labels and returns its out-of-fold predictions; ``chosen`` is the index of the
    candidate selected on the true labels and ``observed`` its score (computed when not
    given). Each permutation repeats the selection: its null value is the best score of all
    ``n_models`` candidates on the permuted labels (the max statistic of Westfall & Young
    1993, from memory), so the p-value accounts for having looked at every candidate and
    kept the best (Cawley & Talbot 2010, from memory). Blocks are permuted as in
    :func:`block_permutation_test`, with the same random sequence for the same seed.

    The same permutations give the naive p-value of the chosen model alone
    (``naive_p_value``, what a test ignoring the selection reports); since the best of all
    candidates is never below the chosen one, ``p_value >= naive_p_value``. Both follow
    Phipson & Smyth (2010): (1 + #{null >= observed}) / (1 + n_permutations).

    Cost: at most ``n_permutations × n_models`` cross-validations. The chosen model is run
    on every permutation, then the others in index order; with ``stop_early`` a permutation
    stops as soon as one candidate reaches the observed score, because the best can then
    only stay at or above it and p counts nothing more (the p-values are exactly those of
    running every candidate). ``null_mean``, ``null_sd`` and ``null`` describe the chosen
    model's null scores; ``n_fitted`` counts the cross-validations run.

    ``scored`` (a boolean mask, default all rows) names the rows whose predictions count,
    e.g. the rows some test part covers when the folds do not cover every row; every block
    is permuted all the same.
    """
    y = _as_1d(y, "y")
    n_permutations = _check_count(n_permutations)
    if isinstance(n_models, bool) or not isinstance(n_models, int | np.integer) or n_models < 1:
        raise ValueError(f"n_models must be a positive integer, got {n_models!r}")
    if isinstance(chosen, bool) or not isinstance(chosen, int | np.integer) \
            or not 0 <= chosen < n_models:
        raise ValueError(f"chosen must index one of the {n_models} models, got {chosen!r}")
    block_label, block_of_row = _block_design(y, blocks, participants)
    labels_all = np.unique(y) if labels is None else _labels(labels)
    score = _metric_fn(metric, labels_all)
    scored = np.ones(y.size, dtype=bool) if scored is None else np.asarray(scored, dtype=bool)
    if scored.shape != y.shape or not scored.any():
        raise ValueError(f"scored must be a mask of the {y.size} rows with at least one True")

    def score_of(y_labels, k):
        return score(y_labels[scored], np.asarray(predict_model(y_labels, k))[scored])

    if observed is None:
        observed = score_of(y.copy(), int(chosen))
    observed = float(observed)
    others = [k for k in range(int(n_models)) if k != chosen]

    rng = np.random.default_rng(seed)
    naive = np.empty(n_permutations)
    best = np.empty(n_permutations)
    fitted = stopped = 0
    for i in range(n_permutations):
        y_perm = block_label[rng.permutation(block_label.size)][block_of_row]
        naive[i] = best[i] = score_of(y_perm, int(chosen))
        fitted += 1
        for k in others:
            if stop_early and best[i] >= observed - 1e-12:
                stopped += 1
                break
            best[i] = max(best[i], score_of(y_perm, k))
            fitted += 1
    return {
        "p_value": _p(best, observed),
        "naive_p_value": _p(naive, observed),
        "min_p_value": 1.0 / (1.0 + n_permutations),
        "observed": observed,
        "null_mean": float(naive.mean()),
        "null_sd": float(naive.std(ddof=1)) if naive.size > 1 else None,
        "n_permutations": n_permutations,
        "n_models": int(n_models),
        "n_fitted": fitted,
        "n_stopped_early": stopped,
        "n_blocks": int(block_label.size),
        "null": naive.tolist(),
    }


def holm(p_values) -> list:
    """Holm's (1979) step-down adjustment of several p-values (from memory): sorted
    ascending, the i-th (from 0) becomes max over j <= i of min(1, (m - j) p_(j)). NaN counts
    as 1 (no evidence)."""
    p = np.nan_to_num(np.asarray(p_values, dtype=float), nan=1.0)
    m = p.size
    order = np.argsort(p, kind="stable")
    adjusted = np.empty(m)
    running = 0.0
    for rank, i in enumerate(order):
        running = max(running, min(1.0, (m - rank) * p[i]))
        adjusted[i] = running
    return adjusted.tolist()


def selection_report(fold_scores, *, chosen, n_train, n_test, alpha=0.05) -> dict:
    """Whether the chosen model's lead over each other candidate is measurable.

    ``fold_scores`` maps each candidate to its scores on the same folds (same order). Each
    other candidate is compared with the chosen one by :func:`paired_comparison` (the
    corrected resampled t-test, Nadeau & Bengio 2003); the p-values are adjusted with
    :func:`holm` over the comparisons, and a lead counts as measurable when the chosen model
    is ahead and the adjusted p is below ``alpha`` (0.05: common practice, no source).
    Returns ``{"chosen", "n_compared", "alpha", "comparisons", "no_measurable_difference"}``;
    the last lists the candidates the test cannot tell from the chosen one.
    """
    if chosen not in fold_scores:
        raise ValueError(f"chosen model {chosen!r} is not among the candidates "
                         f"{', '.join(map(str, fold_scores))}")
    others = [name for name in fold_scores if name != chosen]
    comparisons = []
    for name in others:
        result = paired_comparison(fold_scores[chosen], fold_scores[name], n_train=n_train,
                                   n_test=n_test)
        comparisons.append({"model": name, "mean_difference": result["mean_difference"],
                            "t": result["t"], "p_value": result["p_value"],
                            "n_folds": result["n_folds"], "caution": result["caution"]})
    for item, adjusted in zip(comparisons, holm([c["p_value"] for c in comparisons]),
                              strict=True):
        item["p_adjusted"] = adjusted
        item["measurable"] = bool(item["mean_difference"] > 0 and adjusted < alpha)
    return {"chosen": chosen, "n_compared": len(fold_scores), "alpha": float(alpha),
            "comparisons": comparisons,
            "no_measurable_difference": [c["model"] for c in comparisons
                                         if not c["measurable"]]}


# --------------------------------------------------------------------------- bootstrap


def participant_bootstrap_ci(y_true, y_pred, participants, *, metric: str = "balanced_accuracy",
                             n_boot: int = 1000, level: float = 0.95, seed: int = 0,
                             labels=None) -> dict:
    """Percentile bootstrap interval of a pooled score, resampling participants.

    Each replicate draws as many participants as there are, with replacement, and pools all
    windows of every drawn participant (a participant drawn twice counts twice); the score of
    the pooled predictions is computed from the summed confusion matrices. The interval is
    the (1 - level)/2 and (1 + level)/2 quantiles of the replicates (percentile method,
    Efron & Tibshirani 1993). Replicates where the score is undefined (kappa with one class)
    are left out and counted. Returns ``{"low", "high", "level", "n_boot", "observed",
    "n_participants", "n_undefined"}``.
    """
    if labels is None:
        labels = np.unique(np.concatenate([_as_1d(y_true, "y_true"), _as_1d(y_pred, "y_pred")]))
    y_true, y_pred, labels = _pair(y_true, y_pred, labels)
    participants = _as_1d(participants, "participants")
    if participants.size != y_true.size:
        raise ValueError(
            f"participants must have one value per row ({y_true.size}), got {participants.size}")
    if metric not in METRICS:
        raise ValueError(f"metric must be one of {', '.join(METRICS)}, got {metric!r}")
    if not 0.0 < float(level) < 1.0:
        raise ValueError(f"level must be between 0 and 1 (e.g. 0.95), got {level!r}")
    if isinstance(n_boot, bool) or not isinstance(n_boot, int | np.integer) or n_boot < 1:
        raise ValueError(f"n_boot must be a positive integer, got {n_boot!r}")

    ids, who = np.unique(participants.astype(str), return_inverse=True)
    k = labels.size
    t_idx = _codes(y_true, labels, "y_true")
    p_idx = _codes(y_pred, labels, "y_pred")
    # per-participant confusion matrices, flattened: (P, K*K)
    flat = np.zeros((ids.size, k * k))
    np.add.at(flat, (who, t_idx * k + p_idx), 1.0)
    observed = float(_metric_from_confusion(flat.sum(axis=0).reshape(k, k), metric))

    rng = np.random.default_rng(seed)
    draws = rng.integers(0, ids.size, size=(int(n_boot), ids.size))
    weights = np.zeros((int(n_boot), ids.size))
    np.add.at(weights, (np.arange(int(n_boot))[:, None], draws), 1.0)
    boot = _metric_from_confusion((weights @ flat).reshape(-1, k, k), metric)
    defined = boot[~np.isnan(boot)]
    alpha = (1.0 - float(level)) / 2.0
    if defined.size:
        low, high = np.quantile(defined, [alpha, 1.0 - alpha])
        low, high = float(low), float(high)
    else:
        low = high = None
    return {
        "low": low,
        "high": high,
        "level": float(level),
        "n_boot": int(n_boot),
        "observed": observed,
        "n_participants": int(ids.size),
        "n_undefined": int(boot.size - defined.size),
    }


# --------------------------------------------------------------------------- corrected t-test


def corrected_resampled_ttest(differences, *, n_train, n_test) -> dict:
    """Nadeau & Bengio (2003) corrected resampled t-test on per-fold score differences.

    With J fold differences d_j (k folds x r repeats), t = mean(d) / sqrt((1/J + n_test /
    n_train) * var(d, ddof=1)), df = J - 1, two-sided p from Student's t. The n_test/n_train
    term accounts for the overlap of training sets between folds, which makes the naive paired
    t-test far too confident. ``n_train``/``n_test`` are the sizes of a fold's training and
    test parts (averages over folds are fine; count windows or participants, the ratio is
    what matters).

    Degenerate cases: J < 2 -> sd, t and p are NaN; zero variance -> t is 0 with p = 1 when
    the mean difference is 0, else t = +/-inf with p = NaN (a constant difference carries no
    information about its uncertainty; ``note`` says so).
    """
    d = np.asarray(differences, dtype=float).ravel()
    if d.size == 0:
        raise ValueError("differences is empty; give one score difference per fold")
    if not np.all(np.isfinite(d)):
        raise ValueError("differences contains NaN or infinite values; drop undefined folds "
                         "from both learners before comparing")
    for field, value in (("n_train", n_train), ("n_test", n_test)):
        if not isinstance(value, int | float | np.integer | np.floating) or not value > 0:
            raise ValueError(f"{field} must be a positive number (rows per fold), got {value!r}")
    j = int(d.size)
    mean = float(d.mean())
    result = {"mean_difference": mean, "sd": math.nan, "t": math.nan, "df": j - 1,
              "p_value": math.nan, "n_folds": j, "note": ""}
    if j < 2:
        result["note"] = "one fold difference: no variance, no test"
        return result
    var = float(d.var(ddof=1))
    result["sd"] = math.sqrt(var)
    if np.ptp(d) == 0.0:  # all equal (var may be a rounding residue, not 0)
        result["sd"] = 0.0
        if mean == 0.0:
            result.update(t=0.0, p_value=1.0, note="all fold differences are 0")
        else:
            result.update(t=math.copysign(math.inf, mean),
                          note="every fold gave the same difference: zero variance, p undefined")
        return result
    t = mean / math.sqrt((1.0 / j + float(n_test) / float(n_train)) * var)
    result["t"] = float(t)
    result["p_value"] = float(2.0 * stats.t.sf(abs(t), df=j - 1))
    return result


def paired_comparison(scores_a, scores_b, *, n_train, n_test) -> dict:
    """Compare two learners scored on the same folds: differences a - b fold by fold, then
    :func:`corrected_resampled_ttest`. Adds ``mean_a``, ``mean_b`` and ``caution`` (non-empty
    when there are fewer than 10 folds)."""
    a = np.asarray(scores_a, dtype=float).ravel()
    b = np.asarray(scores_b, dtype=float).ravel()
    if a.size != b.size:
        raise ValueError(f"scores_a and scores_b must come from the same folds; got {a.size} "
                         f"and {b.size} scores")
    result = corrected_resampled_ttest(a - b, n_train=n_train, n_test=n_test)
    result["mean_a"] = float(a.mean())
    result["mean_b"] = float(b.mean())
    result["caution"] = _FEW_FOLDS_CAUTION if a.size < FEW_FOLDS else ""
    return result
