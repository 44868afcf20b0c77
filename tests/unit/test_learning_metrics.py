"""Scores and statistics against scikit-learn 1.9.1, scipy 1.17 and published formulas:
scikit-learn's metric functions, chance levels (DummyClassifier), the Nadeau & Bengio
corrected t-test worked by hand, block permutation tests (validity of the Phipson & Smyth
p-value), the selection-aware permutation test (Cawley & Talbot's selection bias), Holm's
adjustment worked by hand and the participant bootstrap (scipy.stats.bootstrap)."""

import math
import statistics

import numpy as np
import pytest
from scipy import stats
from sklearn import metrics as skm
from sklearn.dummy import DummyClassifier
from sklearn.linear_model import LogisticRegression

from cairn_science.learning.metrics import (
    _metric_from_confusion,
    block_permutation_test,
    chance_level,
    corrected_resampled_ttest,
    holm,
    paired_comparison,
    participant_bootstrap_ci,
    per_site,
    scores,
    selection_permutation_test,
    selection_report,
    smallest_p,
    summarise,
)
from cairn_science.learning.validation import Scheme, outer_folds

LABELS = ["low", "medium", "high"]
pytestmark = pytest.mark.filterwarnings("ignore::UserWarning")


def _noisy_predictions(seed, n=300, accuracy=0.7, labels=LABELS):
    """True labels at random and predictions right with probability ``accuracy``."""
    rng = np.random.default_rng(seed)
    y_true = rng.choice(labels, size=n)
    wrong = rng.choice(labels, size=n)
    y_pred = np.where(rng.random(n) < accuracy, y_true, wrong)
    return y_true, y_pred


# --------------------------------------------------------------------------- scores


def test_scores_equal_sklearn_metric_functions():
    """Reference: scikit-learn 1.9.1 accuracy_score, balanced_accuracy_score, f1_score
    (average="macro"), cohen_kappa_score, recall_score (average=None) and confusion_matrix
    (rows true, columns predicted, in labels order). Equal to 1e-12 (same arithmetic)."""
    y_true, y_pred = _noisy_predictions(1)
    got = scores(y_true, y_pred, labels=LABELS)
    assert got["accuracy"] == pytest.approx(skm.accuracy_score(y_true, y_pred), abs=1e-12)
    assert got["balanced_accuracy"] == pytest.approx(
        skm.balanced_accuracy_score(y_true, y_pred), abs=1e-12)
    assert got["macro_f1"] == pytest.approx(
        skm.f1_score(y_true, y_pred, average="macro", labels=LABELS, zero_division=0),
        abs=1e-12)
    assert got["kappa"] == pytest.approx(skm.cohen_kappa_score(y_true, y_pred), abs=1e-12)
    recall = skm.recall_score(y_true, y_pred, labels=LABELS, average=None, zero_division=0)
    assert got["recall"] == pytest.approx(dict(zip(LABELS, recall, strict=True)), abs=1e-12)
    assert got["confusion"] == skm.confusion_matrix(y_true, y_pred, labels=LABELS).tolist()
    assert got["n"] == 300
    assert got["support"] == {lab: int(np.sum(y_true == lab)) for lab in LABELS}


def test_scores_on_a_subset_missing_a_class_follow_sklearn_defaults():
    """Reference: scikit-learn 1.9.1 defaults when a class is absent (e.g. one site):
    balanced accuracy over classes present in y_true, macro F1 over classes in y_true or
    y_pred, recall 0 with support 0 for the absent class, kappa NaN when both sides use one
    class (cohen_kappa_score's replace_undefined_by=nan)."""
    y_true = np.array(["low", "low", "medium", "medium", "medium"])
    y_pred = np.array(["low", "medium", "medium", "medium", "high"])
    got = scores(y_true, y_pred, labels=LABELS)
    assert got["balanced_accuracy"] == pytest.approx(
        skm.balanced_accuracy_score(y_true, y_pred), abs=1e-12)
    assert got["macro_f1"] == pytest.approx(
        skm.f1_score(y_true, y_pred, average="macro", zero_division=0), abs=1e-12)
    assert got["recall"]["high"] == 0.0 and got["support"]["high"] == 0
    one = scores(["low"] * 4, ["low"] * 4, labels=LABELS)
    assert math.isnan(one["kappa"])
    assert math.isnan(skm.cohen_kappa_score(["low"] * 4, ["low"] * 4, labels=LABELS))
    with pytest.raises(ValueError, match="y_pred contains 'none', which is not in labels"):
        scores(["low"], ["none"], labels=LABELS)


def test_per_site_is_scores_of_each_sites_rows():
    """Reference: scikit-learn 1.9.1 metric functions on each site's rows."""
    y_true, y_pred = _noisy_predictions(2, n=120)
    sites = np.repeat(["s2", "s1", "s3"], 40)
    got = per_site(y_true, y_pred, sites, labels=LABELS)
    assert list(got) == ["s1", "s2", "s3"]
    for site, result in got.items():
        rows = sites == site
        assert result["n"] == 40
        assert result["balanced_accuracy"] == pytest.approx(
            skm.balanced_accuracy_score(y_true[rows], y_pred[rows]), abs=1e-12)
        assert result["kappa"] == pytest.approx(
            skm.cohen_kappa_score(y_true[rows], y_pred[rows]), abs=1e-12)


def _sklearn_scores(y_true, y_pred, labels):
    """Reference: scikit-learn 1.9.1's own metric functions, called as scores() documents."""
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return {
            "accuracy": skm.accuracy_score(y_true, y_pred),
            "balanced_accuracy": skm.balanced_accuracy_score(y_true, y_pred),
            "macro_f1": skm.f1_score(y_true, y_pred, average="macro", zero_division=0),
            "kappa": skm.cohen_kappa_score(y_true, y_pred, labels=labels),
            "recall": skm.recall_score(y_true, y_pred, labels=labels, average=None,
                                       zero_division=0).tolist(),
            "confusion": skm.confusion_matrix(y_true, y_pred, labels=labels).tolist(),
        }


@pytest.mark.parametrize("labels", [LABELS, ["a", "b"], ["w4", "w1", "w3", "w2", "w0"],
                                    [3, 1, 2]])
def test_scores_and_per_site_are_bit_identical_to_sklearn(labels):
    """Reference: scikit-learn 1.9.1 metric functions. Labels are encoded once and the
    scores computed from one confusion matrix; every value must equal scikit-learn's exactly
    (==, not approx), on random subsets that lack classes on one or both sides, with labels
    in report order (not sorted), string or integer."""
    rng = np.random.default_rng(11)
    labels = np.asarray(labels)
    for _ in range(60):
        n = int(rng.integers(1, 80))
        y_true = rng.choice(labels[: int(rng.integers(1, labels.size + 1))], size=n)
        y_pred = np.where(rng.random(n) < 0.6, y_true, rng.choice(labels, size=n))
        sites = rng.choice(["s1", "s2", "s3"], size=n)
        expected = _sklearn_scores(y_true, y_pred, labels)
        got = scores(y_true, y_pred, labels=labels)
        for key in ("accuracy", "balanced_accuracy", "macro_f1"):
            assert got[key] == expected[key], key
        assert got["kappa"] == expected["kappa"] or (
            math.isnan(got["kappa"]) and math.isnan(expected["kappa"]))
        assert list(got["recall"].values()) == expected["recall"]
        assert got["confusion"] == expected["confusion"]
        for site, result in per_site(y_true, y_pred, sites, labels=labels).items():
            rows = sites == site
            ref = _sklearn_scores(y_true[rows], y_pred[rows], labels)
            assert result["balanced_accuracy"] == ref["balanced_accuracy"]
            assert result["macro_f1"] == ref["macro_f1"]
            assert result["accuracy"] == ref["accuracy"]
            assert result["confusion"] == ref["confusion"]
            assert result["kappa"] == ref["kappa"] or (
                math.isnan(result["kappa"]) and math.isnan(ref["kappa"]))


@pytest.mark.parametrize("metric", ["accuracy", "balanced_accuracy", "macro_f1", "kappa"])
def test_metrics_from_confusion_matrices_equal_sklearn(metric):
    """Reference: scikit-learn 1.9.1 metric functions; the bootstrap computes its scores from
    summed confusion matrices, which must give the same values, including subsets that lack
    a class on one or both sides. Equal to 1e-12."""
    reference = {
        "accuracy": skm.accuracy_score,
        "balanced_accuracy": skm.balanced_accuracy_score,
        "macro_f1": lambda t, p: skm.f1_score(t, p, average="macro", zero_division=0),
        "kappa": skm.cohen_kappa_score,
    }[metric]
    rng = np.random.default_rng(4)
    for _ in range(20):
        n = int(rng.integers(3, 30))
        y_true = rng.choice(LABELS[: int(rng.integers(1, 4))], size=n)
        y_pred = rng.choice(LABELS, size=n)
        cm = skm.confusion_matrix(y_true, y_pred, labels=LABELS)
        ours = float(_metric_from_confusion(cm, metric))
        expected = reference(y_true, y_pred)
        if math.isnan(expected):
            assert math.isnan(ours)
        else:
            assert ours == pytest.approx(expected, abs=1e-12)


def test_chance_level_matches_dummy_classifiers():
    """Reference: scikit-learn 1.9.1 DummyClassifier(strategy="most_frequent") for accuracy;
    closed form for balanced accuracy: any constant prediction has recall 1 on one class and
    0 on the others, so mean recall 1/K (checked with balanced_accuracy_score for each of the
    K constants). Unbalanced classes (60/30/10) so the two differ."""
    y = np.array(["low"] * 60 + ["medium"] * 30 + ["high"] * 10)
    got = chance_level(y, labels=LABELS)
    x = np.zeros((y.size, 1))
    dummy = DummyClassifier(strategy="most_frequent").fit(x, y)
    assert got["accuracy"] == pytest.approx(skm.accuracy_score(y, dummy.predict(x)), abs=1e-12)
    assert got["accuracy"] == pytest.approx(0.6, abs=1e-12)
    for label in LABELS:
        constant = np.full(y.size, label)
        assert skm.balanced_accuracy_score(y, constant) == pytest.approx(
            got["balanced_accuracy"], abs=1e-12)
    assert got["balanced_accuracy"] == pytest.approx(1 / 3, abs=1e-12)


def test_summarise_gives_the_spread_with_the_mean():
    """Reference: Python's statistics.mean / statistics.stdev (sample SD, ddof=1). One value
    has no SD (None); NaN values are left out and counted."""
    values = [0.61, 0.72, 0.55, 0.68, 0.70]
    got = summarise(values)
    assert got["mean"] == pytest.approx(statistics.mean(values), abs=1e-12)
    assert got["sd"] == pytest.approx(statistics.stdev(values), abs=1e-12)
    assert (got["min"], got["max"], got["n"]) == (0.55, 0.72, 5)
    single = summarise([0.5])
    assert single["sd"] is None and single["mean"] == 0.5 and single["n"] == 1
    with_nan = summarise([0.5, float("nan"), 0.7])
    assert with_nan["n"] == 2 and with_nan["n_missing"] == 1
    assert with_nan["sd"] == pytest.approx(statistics.stdev([0.5, 0.7]), abs=1e-12)


# --------------------------------------------------------------------------- corrected t-test


def test_corrected_resampled_ttest_worked_by_hand():
    """Nadeau & Bengio 2003, Machine Learning 52:239-281 (from memory): corrected resampled
    t = mean(d) / sqrt((1/J + n_test/n_train) * var(d, ddof=1)), df = J - 1.

    By hand, J = 10 differences (0.02, 0.05, -0.01, 0.03, 0.04, 0.00, 0.06, 0.01, 0.03, 0.02):
      sum = 0.25, mean = 0.025;
      deviations -0.005, 0.025, -0.035, 0.005, 0.015, -0.025, 0.035, -0.015, 0.005, -0.005;
      squared sum = 4 * 0.000025 + 2 * 0.000625 + 2 * 0.001225 + 2 * 0.000225 = 0.00425;
      var = 0.00425 / 9 = 0.00047222; correction 1/10 + 20/80 = 0.35;
      t = 0.025 / sqrt(0.35 * 0.00047222) = 0.025 / 0.012856 = 1.9446.
    The p-value is checked against scipy.stats.t (two-sided, df 9). The naive paired t-test
    (scipy.stats.ttest_1samp, variance / J) on the same numbers gives t = 3.638 and a much
    smaller p: the correction must make p larger. Tolerances 1e-4 on the hand-rounded t,
    1e-12 where the same formula is evaluated.
    """
    d = [0.02, 0.05, -0.01, 0.03, 0.04, 0.00, 0.06, 0.01, 0.03, 0.02]
    got = corrected_resampled_ttest(d, n_train=80, n_test=20)
    assert got["mean_difference"] == pytest.approx(0.025, abs=1e-12)
    assert got["sd"] == pytest.approx(math.sqrt(0.00425 / 9), abs=1e-12)
    assert got["t"] == pytest.approx(1.9446, abs=1e-4)
    assert got["t"] == pytest.approx(0.025 / math.sqrt(0.35 * 0.00425 / 9), abs=1e-12)
    assert got["df"] == 9 and got["n_folds"] == 10
    assert got["p_value"] == pytest.approx(2 * stats.t.sf(1.9446111706564932, df=9), abs=1e-6)
    naive = stats.ttest_1samp(d, 0.0)
    assert naive.statistic == pytest.approx(0.025 / math.sqrt(0.00425 / 9 / 10), abs=1e-9)
    assert got["p_value"] > naive.pvalue
    assert got["p_value"] > 0.05 > naive.pvalue  # here the correction changes the verdict


def test_corrected_ttest_degenerate_cases_are_explicit():
    """Closed forms (documented behaviour, no source): one difference has no variance, so no
    test (NaN); identical non-zero differences give t = +/-inf with an undefined p (NaN);
    all-zero differences give t = 0 and p = 1."""
    one = corrected_resampled_ttest([0.1], n_train=80, n_test=20)
    assert math.isnan(one["t"]) and math.isnan(one["p_value"]) and one["note"]
    constant = corrected_resampled_ttest([0.1, 0.1, 0.1], n_train=80, n_test=20)
    assert constant["t"] == math.inf and math.isnan(constant["p_value"])
    assert constant["sd"] == 0.0 and constant["note"]
    zero = corrected_resampled_ttest([0.0, 0.0], n_train=80, n_test=20)
    assert zero["t"] == 0.0 and zero["p_value"] == 1.0
    with pytest.raises(ValueError, match="n_train must be a positive number"):
        corrected_resampled_ttest([0.1, 0.2], n_train=0, n_test=20)


def test_paired_comparison_differences_fold_by_fold():
    """Nadeau & Bengio 2003 (from memory): the test is on the fold-by-fold differences a - b
    of two learners scored on the same folds, so it equals corrected_resampled_ttest on
    a - b (1e-12). With 5 folds the result carries a caution; with 5 x 5 = 25 folds none."""
    rng = np.random.default_rng(8)
    a = 0.7 + 0.05 * rng.standard_normal(25)
    b = a - 0.02 + 0.03 * rng.standard_normal(25)
    got = paired_comparison(a, b, n_train=400, n_test=100)
    direct = corrected_resampled_ttest(a - b, n_train=400, n_test=100)
    assert got["t"] == pytest.approx(direct["t"], abs=1e-12)
    assert got["p_value"] == pytest.approx(direct["p_value"], abs=1e-12)
    assert got["mean_a"] == pytest.approx(a.mean(), abs=1e-12)
    assert got["caution"] == ""
    few = paired_comparison(a[:5], b[:5], n_train=400, n_test=100)
    assert "too few folds for a meaningful test" in few["caution"]
    with pytest.raises(ValueError, match="same folds"):
        paired_comparison(a, b[:5], n_train=400, n_test=100)


# --------------------------------------------------------------------------- permutation test


def _blocked_data(seed, *, n_participants=6, n_blocks=4, n_windows=10, effect=0.0):
    """Participants x blocks x windows; each participant has half its blocks "low" and half
    "high" (block order at random), features = participant offset + effect * label + noise."""
    rng = np.random.default_rng(seed)
    participants, blocks, y = [], [], []
    for p in range(n_participants):
        labels = rng.permutation(["low", "high"] * (n_blocks // 2))
        for b, label in enumerate(labels):
            participants += [f"s/p{p}"] * n_windows
            blocks += [f"s/p{p}/run{b}"] * n_windows
            y += [label] * n_windows
    participants, blocks, y = np.array(participants), np.array(blocks), np.array(y)
    offsets = rng.normal(0.0, 1.0, (n_participants, 5))
    which = np.unique(participants, return_inverse=True)[1]
    x = offsets[which] + rng.normal(0.0, 1.0, (y.size, 5))
    x[:, 0] += effect * (y == "high")
    return x, y, blocks, participants


def test_block_permutation_finds_a_real_effect():
    """Phipson & Smyth 2010 (from memory): p = (1 + #{null >= observed}) / (1 + n_perm), so
    the smallest possible p is 1 / (1 + n_perm) = 0.01 with 99 permutations. A strong effect
    (4 SD on one feature), scored by a participant-grouped 3-fold logistic regression rerun on
    every permuted label vector, beats every null score: p = 0.01. The null mean must be near
    chance (0.5 +/- 0.15: 240 windows but only 24 blocks decide the labels, binomial SD of a
    proportion over 24 blocks about 0.1)."""
    x, y, blocks, participants = _blocked_data(0, effect=4.0)
    folds = outer_folds(Scheme("grouped_kfold", n_splits=3), y=y, participants=participants)

    def predict(y_labels):
        pred = np.empty_like(y_labels)
        for fold in folds:
            model = LogisticRegression().fit(x[fold.train], y_labels[fold.train])
            pred[fold.test] = model.predict(x[fold.test])
        return pred

    got = block_permutation_test(predict, y, blocks, participants, n_permutations=99, seed=1)
    assert got["observed"] > 0.9
    assert got["p_value"] == pytest.approx(1 / 100, abs=1e-12)
    assert abs(got["null_mean"] - 0.5) < 0.15
    assert got["n_permutations"] == 99 and got["n_blocks"] == 24


def test_block_permutation_p_is_valid_without_an_effect():
    """Phipson & Smyth 2010 (from memory): under exchangeability P(p <= alpha) <= alpha.
    Here the block labels are a random assignment across all blocks and the predictor
    ignores the labels (fixed random predictions), so observed and permuted scores are
    exchangeable. Over 300 independent data sets with 19 permutations each, the share of
    p <= 0.05 and of p <= 0.25 must not exceed alpha by more than 3 binomial SDs
    (sqrt(alpha (1 - alpha) / 300): 0.013 and 0.025). Also a fixed-seed example is > 0.05."""
    rejections = {0.05: 0, 0.25: 0}
    n_sets = 300
    for seed in range(n_sets):
        rng = np.random.default_rng(100 + seed)
        blocks = np.repeat([f"p{b // 3}/run{b % 3}" for b in range(12)], 5)
        participants = np.array([b.split("/")[0] for b in blocks])
        block_labels = rng.permutation(["low", "high"] * 6)
        y = np.repeat(block_labels, 5)
        fixed = rng.choice(["low", "high"], size=y.size)
        got = block_permutation_test(lambda _y, fixed=fixed: fixed, y, blocks, participants,
                                     n_permutations=19, seed=seed)
        for alpha in rejections:
            rejections[alpha] += got["p_value"] <= alpha + 1e-12
    for alpha, count in rejections.items():
        assert count / n_sets <= alpha + 3 * math.sqrt(alpha * (1 - alpha) / n_sets), \
            (alpha, count)

    x, y, blocks, participants = _blocked_data(3, effect=0.0)
    fixed = np.random.default_rng(5).choice(["low", "high"], size=y.size)
    example = block_permutation_test(lambda _y: fixed, y, blocks, participants,
                                     n_permutations=99, seed=0)
    assert example["p_value"] > 0.05


def test_block_permutation_keeps_blocks_whole():
    """Common practice, no source (and scikit-learn 1.9 permutation_test_score permutes
    window by window within groups, which is what this avoids): every label vector given to
    predict_fn is constant on every block, keeps the number of blocks of each label, and at
    least one differs from the true labels."""
    _, y, blocks, participants = _blocked_data(2)
    seen = []

    def spy(y_labels):
        seen.append(np.array(y_labels))
        return y_labels  # a perfect "predictor" of whatever it is given

    block_ids = np.unique(blocks)
    true_counts = {lab: sum(y[blocks == b][0] == lab for b in block_ids)
                   for lab in ("low", "high")}
    block_permutation_test(spy, y, blocks, participants, n_permutations=20, seed=0)
    assert len(seen) == 21  # the observed run plus 20 permutations
    for labels in seen:
        for b in block_ids:
            assert np.unique(labels[blocks == b]).size == 1
        counts = {lab: sum(labels[blocks == b][0] == lab for b in block_ids)
                  for lab in ("low", "high")}
        assert counts == true_counts
    assert any(not np.array_equal(labels, y) for labels in seen[1:])


def test_block_permutation_refuses_mixed_label_blocks():
    """Common practice, no source: a block with two labels cannot be permuted as a unit; a
    block shared by two participants breaks the grouping."""
    y = np.array(["low", "low", "high", "high"])
    participants = np.array(["p1", "p1", "p2", "p2"])
    with pytest.raises(ValueError, match="block 'b1' has more than one label"):
        block_permutation_test(lambda v: v, y, np.array(["b1", "b1", "b1", "b2"]), participants)
    with pytest.raises(ValueError, match="block 'b1' spans participants"):
        block_permutation_test(lambda v: v, np.array(["low"] * 3 + ["high"]),
                               np.array(["b1", "b1", "b1", "b2"]),
                               np.array(["p1", "p1", "p2", "p2"]))


def _null_candidates(seed, *, n_participants=20, n_windows=4, n_features=8):
    """Null data with several candidate models: each participant has one "low" and one
    "high" block, features are pure noise (no label signal). Candidate k is a nearest-centroid
    rule on feature k alone, refitted on every training part (vectorised here so that
    thousands of cross-validations stay cheap)."""
    rng = np.random.default_rng(seed)
    participants, blocks, y = [], [], []
    for p in range(n_participants):
        for b, label in enumerate(rng.permutation(["low", "high"])):
            participants += [f"s/p{p}"] * n_windows
            blocks += [f"s/p{p}/run{b}"] * n_windows
            y += [label] * n_windows
    participants, blocks, y = np.array(participants), np.array(blocks), np.array(y)
    x = rng.normal(size=(y.size, n_features))
    folds = outer_folds(Scheme("grouped_kfold", n_splits=5), y=y, participants=participants,
                        seed=seed)

    def predict_model(y_labels, k):
        predicted = np.empty(y.size, dtype=object)
        for fold in folds:
            train = x[fold.train, k]
            high = train[y_labels[fold.train] == "high"].mean()
            low = train[y_labels[fold.train] == "low"].mean()
            test = x[fold.test, k]
            predicted[fold.test] = np.where(np.abs(test - high) < np.abs(test - low),
                                            "high", "low")
        return predicted.astype(str)

    return predict_model, y, blocks, participants, n_features


def test_selection_aware_p_is_valid_on_null_data_where_the_naive_one_is_not():
    """Cawley & Talbot 2010 JMLR, "On over-fitting in model selection and subsequent
    selection bias in performance evaluation" (from memory): the best of several models'
    cross-validated scores is optimistic, so testing the winner as if it had been fixed in
    advance overstates the evidence. Repeating the choice on every permutation (the max
    statistic, Westfall & Young 1993, from memory) restores a valid test: under the null,
    P(p <= alpha) <= alpha (Phipson & Smyth 2010). On 60 null data sets with 8 candidates
    (nearest-centroid rules on 8 noise features) and 39 permutations each: the
    selection-aware p is never below the naive one from the same permutations, its mean is
    higher, its rejection rate at 0.05 stays within 3 binomial SDs of 0.05 (60 sets: SD
    0.028), and the naive rate is higher than the selection-aware one."""
    n_sets, alpha = 60, 0.05
    aware, naive = [], []
    for seed in range(n_sets):
        predict_model, y, blocks, participants, n_models = _null_candidates(seed)
        observed = [scores(y, predict_model(y, k), labels=["low", "high"])["balanced_accuracy"]
                    for k in range(n_models)]
        chosen = int(np.argmax(observed))
        got = selection_permutation_test(predict_model, y, blocks, participants,
                                         n_models=n_models, chosen=chosen,
                                         observed=observed[chosen], n_permutations=39,
                                         seed=1000 + seed)
        assert got["p_value"] >= got["naive_p_value"]
        assert got["min_p_value"] == pytest.approx(1 / 40)
        aware.append(got["p_value"])
        naive.append(got["naive_p_value"])
    aware, naive = np.array(aware), np.array(naive)
    assert aware.mean() > naive.mean()
    aware_rate = float(np.mean(aware <= alpha + 1e-12))
    naive_rate = float(np.mean(naive <= alpha + 1e-12))
    assert aware_rate <= alpha + 3 * math.sqrt(alpha * (1 - alpha) / n_sets), aware_rate
    assert naive_rate > aware_rate, (naive_rate, aware_rate)


def test_selection_test_with_one_model_is_the_block_test_and_stopping_early_changes_no_p():
    """Common practice, no source: with a single candidate there is no selection, so the
    selection-aware test must be the block permutation test itself (same permutations for
    the same seed, same p). Stopping a permutation once a candidate reaches the observed
    score only skips fits whose result cannot change p: the p-values equal those of fitting
    every candidate, with fewer fits."""
    predict_model, y, blocks, participants, n_models = _null_candidates(3)
    one = selection_permutation_test(predict_model, y, blocks, participants, n_models=1,
                                     chosen=0, n_permutations=49, seed=5)
    block = block_permutation_test(lambda v: predict_model(v, 0), y, blocks, participants,
                                   n_permutations=49, seed=5)
    assert one["p_value"] == one["naive_p_value"] == block["p_value"]
    assert one["null"] == block["null"]
    assert block["min_p_value"] == pytest.approx(1 / 50) == smallest_p(49)

    full = selection_permutation_test(predict_model, y, blocks, participants,
                                      n_models=n_models, chosen=2, n_permutations=49, seed=5,
                                      stop_early=False)
    quick = selection_permutation_test(predict_model, y, blocks, participants,
                                       n_models=n_models, chosen=2, n_permutations=49, seed=5)
    assert full["n_fitted"] == 49 * n_models and full["n_stopped_early"] == 0
    assert quick["n_fitted"] < full["n_fitted"] and quick["n_stopped_early"] > 0
    for key in ("p_value", "naive_p_value", "null"):
        assert quick[key] == full[key], key
    with pytest.raises(ValueError, match="chosen must index one of the 8 models"):
        selection_permutation_test(predict_model, y, blocks, participants, n_models=8,
                                   chosen=8, n_permutations=3)


def test_holm_adjustment_worked_by_hand():
    """Holm 1979 (from memory): sort the m p-values ascending; the i-th (from 1) becomes
    max over j <= i of min(1, (m - j + 1) p_(j)). For p = 0.01, 0.04, 0.03, 0.005:
    0.005 x 4 = 0.02; 0.01 x 3 = 0.03; 0.03 x 2 = 0.06; 0.04 x 1 = 0.04 -> max 0.06.
    NaN (no test possible) counts as 1."""
    assert holm([0.01, 0.04, 0.03, 0.005]) == pytest.approx([0.03, 0.06, 0.06, 0.02])
    assert holm([0.2, float("nan")]) == pytest.approx([0.4, 1.0])
    assert holm([]) == []


def test_selection_report_names_the_models_the_corrected_test_cannot_tell_apart():
    """Nadeau & Bengio 2003 corrected resampled t-test via paired_comparison, Holm-adjusted
    (formulas checked above): a candidate 0.2 behind on every one of 10 folds, with a little
    fold-to-fold noise, is measurably behind; one whose differences straddle 0 is not."""
    rng = np.random.default_rng(0)
    best = 0.8 + rng.normal(0, 0.01, 10)
    report = selection_report({"a": best, "far": best - 0.2 + rng.normal(0, 0.01, 10),
                               "near": best + rng.normal(0, 0.05, 10)},
                              chosen="a", n_train=80, n_test=20)
    assert report["n_compared"] == 3
    assert report["no_measurable_difference"] == ["near"]
    far = next(c for c in report["comparisons"] if c["model"] == "far")
    assert far["measurable"] and far["p_adjusted"] < 0.05 and far["mean_difference"] > 0.15
    with pytest.raises(ValueError, match="not among the candidates"):
        selection_report({"a": best}, chosen="b", n_train=80, n_test=20)


# --------------------------------------------------------------------------- bootstrap


def _participant_predictions(seed, n_participants, n_windows=30):
    """Binary labels; each participant's predictions are right with their own probability
    (uniform 0.5-0.95), so the pooled score varies from participant to participant."""
    rng = np.random.default_rng(seed)
    accuracy = rng.uniform(0.5, 0.95, n_participants)
    participants = np.repeat([f"s/p{i:02d}" for i in range(n_participants)], n_windows)
    y_true = rng.choice(["low", "high"], size=participants.size)
    right = rng.random(participants.size) < np.repeat(accuracy, n_windows)
    y_pred = np.where(right, y_true, np.where(y_true == "low", "high", "low"))
    return y_true, y_pred, participants


def test_participant_bootstrap_matches_scipy_percentile_bootstrap():
    """Reference: scipy 1.17 stats.bootstrap(method="percentile") resampling participant
    indices, with sklearn's balanced_accuracy_score on the pooled windows of the drawn
    participants. The two use different random draws, so they agree up to Monte Carlo error:
    with 1000 and 4000 replicates the 2.5 % quantile of a bootstrap distribution of SD ~0.03
    moves by about sqrt(0.025 * 0.975 / 1000) / density = 0.0025; tolerance 0.015 (> 4 SD
    of the difference). The interval contains the observed pooled score."""
    y_true, y_pred, participants = _participant_predictions(0, 20)
    ids = np.unique(participants)
    rows = [np.flatnonzero(participants == p) for p in ids]

    def pooled(indices):
        take = np.concatenate([rows[i] for i in indices])
        return skm.balanced_accuracy_score(y_true[take], y_pred[take])

    reference = stats.bootstrap((np.arange(ids.size),), pooled, vectorized=False,
                                n_resamples=1000, method="percentile", rng=1)
    got = participant_bootstrap_ci(y_true, y_pred, participants, n_boot=4000, seed=2)
    assert got["low"] == pytest.approx(reference.confidence_interval.low, abs=0.015)
    assert got["high"] == pytest.approx(reference.confidence_interval.high, abs=0.015)
    observed = skm.balanced_accuracy_score(y_true, y_pred)
    assert got["observed"] == pytest.approx(observed, abs=1e-12)
    assert got["low"] < observed < got["high"]
    assert got["level"] == 0.95 and got["n_boot"] == 4000 and got["n_participants"] == 20


def test_participant_bootstrap_is_wider_with_fewer_participants():
    """Efron & Tibshirani 1993 (from memory): the bootstrap SE of a mean over n independent
    units scales as 1/sqrt(n), so 6 participants should give an interval about twice as wide
    as 24. The percentile bootstrap is known to be too narrow with very few units (and the
    two data sets differ), so only "wider" is required. Both intervals contain their observed
    score; kappa works too."""
    wide = participant_bootstrap_ci(*_participant_predictions(1, 6), n_boot=2000, seed=0)
    narrow = participant_bootstrap_ci(*_participant_predictions(1, 24), n_boot=2000, seed=0)
    assert wide["high"] - wide["low"] > narrow["high"] - narrow["low"]
    for ci in (wide, narrow):
        assert ci["low"] <= ci["observed"] <= ci["high"]
    kappa = participant_bootstrap_ci(*_participant_predictions(1, 24), metric="kappa",
                                     n_boot=500, seed=0)
    assert kappa["low"] <= kappa["observed"] <= kappa["high"]
