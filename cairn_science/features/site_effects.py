"""How much of a feature table is about the site rather than the person or the workload.

Two views, both grouped by participant so that many windows of one person do not count as
many people: how well a classifier tells the site from the features (balanced accuracy under
participant-grouped cross-validation, against chance), and which features differ most between
sites (the share of variance between sites, eta squared, of the per-participant means).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

#: Balanced accuracy above chance by this much is reported as a strong site effect.
STRONG_ABOVE_CHANCE = 0.2
TOP_FEATURES = 10


def _eta_squared(means, sites):
    """Per column: between-site sum of squares over total (NaN rows ignored per column)."""
    out = np.full(means.shape[1], np.nan)
    labels = np.unique(sites)
    for j in range(means.shape[1]):
        column = means[:, j]
        ok = np.isfinite(column)
        if ok.sum() < 3:
            continue
        values, groups = column[ok], sites[ok]
        grand = values.mean()
        total = ((values - grand) ** 2).sum()
        if total <= 0:
            continue
        between = sum(
            (groups == s).sum() * (values[groups == s].mean() - grand) ** 2
            for s in labels if (groups == s).any()
        )
        out[j] = between / total
    return out


def site_effects(values: np.ndarray, *, sites: Sequence[str], participants: Sequence[str],
                 columns: Sequence[str], n_splits: int = 5, random_state: int = 0) -> dict:
    """Report of site effects for a table.

    ``values`` (n_rows, n_columns) with NaN for missing; ``sites`` and ``participants`` per
    row (participant labels need only be unique within a site). Returns a JSON-ready dict.
    """
    from sklearn.impute import SimpleImputer
    from sklearn.linear_model import LogisticRegression
    from sklearn.metrics import balanced_accuracy_score
    from sklearn.model_selection import StratifiedGroupKFold
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    values = np.asarray(values, dtype=float)
    sites = np.asarray(sites).astype(str)
    people = np.char.add(np.char.add(sites, "/"), np.asarray(participants).astype(str))
    site_names = sorted(set(sites.tolist()))
    report = {"sites": site_names, "n_rows": int(values.shape[0]),
              "n_participants": int(len(set(people.tolist())))}
    if len(site_names) < 2:
        return {**report, "applies": False,
                "why": "one site only: nothing to compare"}
    usable = np.isfinite(values).any(axis=0)
    values = values[:, usable]
    columns = [c for c, keep in zip(columns, usable, strict=True) if keep]

    # Per-participant means: the unit of comparison between sites.
    person_ids, inverse = np.unique(people, return_inverse=True)
    sums = np.zeros((person_ids.size, values.shape[1]))
    counts = np.zeros((person_ids.size, values.shape[1]))
    finite = np.isfinite(values)
    np.add.at(sums, inverse, np.where(finite, values, 0.0))
    np.add.at(counts, inverse, finite)
    with np.errstate(invalid="ignore", divide="ignore"):
        means = sums / counts
    person_site = np.array([p.split("/", 1)[0] for p in person_ids])
    eta = _eta_squared(means, person_site)
    order = [j for j in np.argsort(-np.nan_to_num(eta, nan=-1.0)) if np.isfinite(eta[j])]
    top = []
    for j in order[:TOP_FEATURES]:
        top.append({
            "column": columns[j], "eta_squared": round(float(eta[j]), 4),
            "site_means": {s: (round(float(np.nanmean(means[person_site == s, j])), 6)
                               if np.isfinite(means[person_site == s, j]).any() else None)
                           for s in site_names},
        })
    report.update(applies=True, top_features=top,
                  median_eta_squared=(round(float(np.nanmedian(eta)), 4)
                                      if np.isfinite(eta).any() else None))

    per_site = {s: int((person_site == s).sum()) for s in site_names}
    splits = min(n_splits, min(per_site.values()))
    chance = 1.0 / len(site_names)
    report["chance"] = round(chance, 4)
    if splits < 2:
        report["classifier"] = {"ran": False,
                                "why": "a site has fewer than 2 participants: no grouped split"}
        return report
    model = make_pipeline(SimpleImputer(strategy="median", keep_empty_features=True),
                          StandardScaler(), LogisticRegression(max_iter=2000))
    splitter = StratifiedGroupKFold(n_splits=splits, shuffle=True, random_state=random_state)
    predicted = np.empty(sites.size, dtype=object)
    fold_scores = []
    for train, test in splitter.split(values, sites, groups=people):
        model.fit(values[train], sites[train])
        predicted[test] = model.predict(values[test])
        fold_scores.append(balanced_accuracy_score(sites[test], predicted[test]))
    pooled = balanced_accuracy_score(sites, predicted.astype(str))
    report["classifier"] = {
        "ran": True, "model": "standardised logistic regression", "n_splits": splits,
        "grouping": "participant", "balanced_accuracy": round(float(pooled), 4),
        "fold_mean": round(float(np.mean(fold_scores)), 4),
        "fold_sd": round(float(np.std(fold_scores, ddof=1)), 4) if splits > 1 else None,
    }
    strong = pooled - chance >= STRONG_ABOVE_CHANCE
    report["warning"] = (
        f"the site can be told from these features with balanced accuracy {pooled:.2f} "
        f"(chance {chance:.2f}) on participants not seen in training: a classifier may learn "
        "the site, not the workload; consider per-site standardisation (fitted on training "
        "folds only) or leave-one-site-out validation" if strong else "")
    return report
