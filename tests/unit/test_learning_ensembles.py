"""Learners, participant-aware bagging and stacking, and the model digest / skops release.

References: scikit-learn 1.9.1 (``BaggingClassifier``, ``StackingClassifier``, the splitters,
``check_estimator``, ``DummyClassifier``), skops 0.16.0 (``get_untrusted_types``, ``loads``
with ``trusted=``) and closed forms. Equalities with scikit-learn are exact (no tolerance):
with the same rows drawn, the same members and the same splits, the same floating-point
operations run in the same order.
"""

import os
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
import skops.io
from numpy.testing import assert_array_equal
from sklearn.base import BaseEstimator, ClassifierMixin, clone, is_classifier
from sklearn.datasets import load_digits, load_wine
from sklearn.discriminant_analysis import LinearDiscriminantAnalysis
from sklearn.dummy import DummyClassifier
from sklearn.ensemble import BaggingClassifier, RandomForestClassifier, StackingClassifier
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import (
    GroupKFold,
    StratifiedGroupKFold,
    StratifiedKFold,
    train_test_split,
)
from sklearn.neighbors import KNeighborsClassifier
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.svm import LinearSVC
from sklearn.tree import DecisionTreeClassifier
from sklearn.utils.estimator_checks import check_estimator

from cairn_science.learning.canonical import (
    load_release,
    model_digest,
    skops_bytes,
    trusted_types,
)
from cairn_science.learning.ensembles import (
    GroupBaggingClassifier,
    GroupCalibratedClassifier,
    GroupStackingClassifier,
)
from cairn_science.learning.learners import LEARNERS, make_learner
from cairn_science.learning.recurrent import reads_sequences, with_sequence_keys

REPO = Path(__file__).resolve().parents[2]
BAGGING = "cairn_science.learning.ensembles.GroupBaggingClassifier"
STACKING = "cairn_science.learning.ensembles.GroupStackingClassifier"
TREE = "sklearn.tree._tree.Tree"



@pytest.fixture(scope="module")
def wine():
    """load_wine, standardised (178 rows, 13 features, 3 classes), with 12 pseudo-participants
    that each hold rows of every class."""
    X, y = load_wine(return_X_y=True)
    return StandardScaler().fit_transform(X), y, np.arange(y.size) % 12


@pytest.fixture(scope="module")
def digits():
    """The first 400 rows of load_digits (64 features, 10 classes), 8 pseudo-participants."""
    X, y = load_digits(return_X_y=True)
    return X[:400] / 16.0, y[:400], np.arange(400) % 8


def participant_table(n_participants=10, n_classes=3, *, seed=0, between=False):
    """Windowed data as a study has it: each participant gives 2-5 windows per condition
    (within-subject), or all its windows in one condition (``between``). Column 0 is the row
    number (for the spies below); the others are a class effect + a participant offset +
    noise."""
    rng = np.random.default_rng(seed)
    rows, labels, groups = [], [], []
    for p in range(n_participants):
        offset = rng.normal(0.0, 1.0, 4)
        classes = [p % n_classes] if between else range(n_classes)
        for c in classes:
            for _ in range(2 + (p + c) % 4):
                rows.append(offset + 1.5 * c + rng.normal(0.0, 1.0, 4))
                labels.append(c)
                groups.append(f"site-A/P{p:02d}")
    X = np.column_stack([np.arange(len(rows)), np.array(rows)])
    return X, np.array(labels), np.array(groups)


SPY_LOG = []


class RowSpy(ClassifierMixin, BaseEstimator):
    """Test double: remembers the row numbers (column 0 of X) it is fitted on and logs, at
    each predict_proba, (rows fitted on, rows predicted). It predicts its training class
    frequencies."""

    def fit(self, X, y):
        self.classes_ = np.unique(y)
        self.train_rows_ = np.asarray(X[:, 0]).astype(int)
        self.prior_ = np.array([np.mean(y == c) for c in self.classes_])
        return self

    def predict_proba(self, X):
        SPY_LOG.append((self.train_rows_.copy(), np.asarray(X[:, 0]).astype(int)))
        return np.tile(self.prior_, (X.shape[0], 1))

    def predict(self, X):
        return self.classes_[np.argmax(self.predict_proba(X), axis=1)]


# --- bagging against scikit-learn ---------------------------------------------------------

@pytest.mark.parametrize("estimator", [
    LinearDiscriminantAnalysis(),
    make_pipeline(StandardScaler(), KNeighborsClassifier(5)),
    make_pipeline(StandardScaler(), DecisionTreeClassifier(max_features=0.5)),
], ids=["lda", "knn", "random-tree"])
def test_window_bagging_soft_equals_sklearn(wine, estimator):
    """Reference: scikit-learn 1.9.1 BaggingClassifier (bootstrap=True, max_samples=None,
    max_features=1.0), soft voting = mean predict_proba. Our window mode draws from the same
    RandomState stream (per-member seeds, then a discarded feature permutation, then
    randint(0, n, n)), and seeds members' random_state the same way, so the draws, the
    members' random states and the probabilities are exactly equal. The members chosen take
    no sample_weight in fit (a Pipeline does not expose it), so scikit-learn also repeats
    rows rather than weighting them. The random tree (max_features=0.5) checks that nested
    random states are seeded as scikit-learn seeds them."""
    X, y, _ = wine
    sk = BaggingClassifier(estimator, n_estimators=6, random_state=3).fit(X, y)
    ours = GroupBaggingClassifier(estimator, n_estimators=6, sample_by="window",
                                  voting="soft", random_state=3).fit(X, y)
    for theirs, mine in zip(sk.estimators_samples_, ours.draws_, strict=True):
        assert_array_equal(mine, theirs)
    for theirs, mine in zip(sk.estimators_, ours.members_, strict=True):
        states = {k: v for k, v in theirs.get_params().items() if k.endswith("random_state")}
        assert states == {k: mine.get_params()[k] for k in states}
    assert_array_equal(ours.predict_proba(X), sk.predict_proba(X))
    assert_array_equal(ours.predict(X), sk.predict(X))


def test_window_bagging_hard_equals_sklearn_voting(wine):
    """Reference: scikit-learn 1.9.1 BaggingClassifier with a member without predict_proba
    (LinearSVC) "resorts to voting": predict_proba = share of votes, predict = argmax, the
    first class on ties (numpy argmax returns the first maximum). Ours with voting="hard" must
    give exactly the same shares and labels. C=0.01 and 4 members make split votes common;
    the test asserts that some rows do split, so the comparison covers more than unanimous
    votes."""
    X, y, _ = wine
    member = make_pipeline(StandardScaler(), LinearSVC(C=0.01))
    sk = BaggingClassifier(member, n_estimators=4, random_state=5).fit(X, y)
    ours = GroupBaggingClassifier(member, n_estimators=4, sample_by="window", voting="hard",
                                  random_state=5).fit(X, y)
    shares = ours.predict_proba(X)
    assert_array_equal(shares, sk.predict_proba(X))
    assert_array_equal(ours.predict(X), sk.predict(X))
    assert (shares.max(axis=1) < 1.0).any()


def test_hard_vote_ties_go_to_the_first_class():
    """Closed form: with 2 members each voting for the majority class of its own draw
    (DummyClassifier "most_frequent", scikit-learn 1.9.1: the first class on a count tie), a
    row's vote shares are the members' votes / 2, computed here from ``draws_`` and y alone;
    on a 1-1 split ``predict`` must return the class first in ``classes_``. Labels are
    between-subject, so different participant draws have different majorities; the test
    needs at least one seed with a split vote."""
    X, y, groups = participant_table(8, 2, between=True)
    labels = np.array(["high", "low"])[y]  # classes_ = ["high", "low"]
    split_seen = 0
    for seed in range(12):
        bag = GroupBaggingClassifier(DummyClassifier(strategy="most_frequent"),
                                     n_estimators=2, voting="hard",
                                     random_state=seed).fit(X, labels, groups=groups)
        votes = [np.argmax(np.bincount(y[rows], minlength=2)) for rows in bag.draws_]
        expected = np.bincount(votes, minlength=2) / 2.0
        assert_array_equal(bag.predict_proba(X[:3]), np.tile(expected, (3, 1)))
        if votes[0] != votes[1]:
            split_seen += 1
            assert_array_equal(bag.predict(X[:3]), ["high"] * 3)
    assert split_seen > 0


def test_soft_vote_gives_unseen_classes_zero():
    """Closed form: DummyClassifier(strategy="prior") predicts its training class frequencies
    (scikit-learn 1.9.1), so the soft vote of the bagging must be the mean over members of
    bincount(y[draw], minlength=3) / len(draw) -- a member whose draw lacks a class gives it
    0 and still counts in the mean. Between-subject labels with 2 participants per class make
    draws without some class likely; the test requires at least one."""
    X, y, groups = participant_table(6, 3, between=True)
    bag = GroupBaggingClassifier(DummyClassifier(strategy="prior"), n_estimators=8,
                                 random_state=1).fit(X, y, groups=groups)
    freqs = [np.bincount(y[rows], minlength=3) / rows.size for rows in bag.draws_]
    assert any(member.classes_.size < 3 for member in bag.members_)
    np.testing.assert_allclose(bag.predict_proba(X[:4]), np.tile(np.mean(freqs, axis=0), (4, 1)),
                               rtol=0, atol=1e-15)  # sums of 8 floats: rounding only


# --- participant bootstrap ------------------------------------------------------------------

def test_participant_bootstrap_takes_whole_participants():
    """Definition (the brief; cluster bootstrap, Davison & Hinkley 1997, from memory): each
    member's draw is n_participants draws with replacement of participants, each contributing
    all its rows (twice if drawn twice). Checked on what the members were really fitted on
    (the RowSpy's rows), not only on ``draws_``: every participant's rows appear equally often
    (0, 1, 2... times) and the multiplicities add up to the number of participants. Uneven
    window counts per participant make a row-level draw detectable."""
    X, y, groups = participant_table(10, 3)
    bag = GroupBaggingClassifier(RowSpy(), n_estimators=15, random_state=0)
    bag.fit(X, y, groups=groups)
    units = np.unique(groups)
    for member, rows in zip(bag.members_, bag.draws_, strict=True):
        assert_array_equal(member.train_rows_, rows)
        counts = np.bincount(rows, minlength=y.size)
        multiplicity = []
        for unit in units:
            mine = counts[groups == unit]
            assert np.all(mine == mine[0]), f"{unit} partly drawn"
            multiplicity.append(mine[0])
        assert sum(multiplicity) == units.size


def test_participant_bootstrap_share_of_distinct_participants():
    """Closed form: in a bootstrap of n items the expected share of distinct items drawn is
    1 - (1 - 1/n)^n (Efron & Tibshirani 1993, from memory), 0.6386 for n = 10. Over 300
    members the mean share has a standard error of about 0.006 (the per-draw SD is about 0.1);
    tolerance 0.03 (5 SE)."""
    X, y, groups = participant_table(10, 3)
    bag = GroupBaggingClassifier(DummyClassifier(), n_estimators=300, random_state=2)
    bag.fit(X, y, groups=groups)
    shares = [np.unique(groups[rows]).size / 10 for rows in bag.draws_]
    assert abs(np.mean(shares) - (1 - 0.9 ** 10)) < 0.03


def test_window_bootstrap_is_not_by_participant():
    """Control for the test above (common practice, no source): a row bootstrap splits
    participants, i.e. some participant has only part of its rows drawn in some member."""
    X, y, groups = participant_table(10, 3)
    bag = GroupBaggingClassifier(DummyClassifier(), n_estimators=5, sample_by="window",
                                 random_state=0).fit(X, y)
    partial = 0
    for rows in bag.draws_:
        counts = np.bincount(rows, minlength=y.size)
        partial += sum(len(set(counts[groups == u])) > 1 for u in np.unique(groups))
    assert partial > 0


def test_bagging_seed_decides_the_draws():
    """Common practice, no source: the same random_state gives the same draws, another
    gives other draws."""
    X, y, groups = participant_table(10, 3)
    draws = [GroupBaggingClassifier(DummyClassifier(), n_estimators=4, random_state=s)
             .fit(X, y, groups=groups).draws_ for s in (7, 7, 8)]
    assert all(np.array_equal(a, b) for a, b in zip(draws[0], draws[1], strict=True))
    assert not all(np.array_equal(a, b) for a, b in zip(draws[0], draws[2], strict=True))


# --- stacking ---------------------------------------------------------------------------------

def _members():
    return [("lda", LinearDiscriminantAnalysis(solver="lsqr", shrinkage="auto")),
            ("logistic", LogisticRegression(max_iter=5000)),
            ("tree", DecisionTreeClassifier(max_depth=4, random_state=0)),
            ("knn", make_pipeline(StandardScaler(), KNeighborsClassifier(7)))]


@pytest.mark.parametrize("case", ["wine-groups", "wine-binary-passthrough", "digits-groups",
                                  "digits-no-groups", "wine-decision-function"])
def test_stacking_equals_sklearn_on_the_same_splits(wine, digits, case):
    """Reference: scikit-learn 1.9.1 StackingClassifier(cv=<list of (train, test)>), given the
    inner splits our stacking chose: exactly equal predict_proba and predict on held-out
    rows. Covers three classes, two classes (scikit-learn drops each member's first
    probability column) with passthrough, ten classes, the ungrouped path and
    stack_method="decision_function"."""
    X, y, groups = digits if case.startswith("digits") else wine
    members, method, passthrough = _members(), "predict_proba", False
    if case == "wine-binary-passthrough":
        keep = y < 2
        X, y, groups = X[keep], y[keep], groups[keep]
        passthrough = True
    if case == "wine-decision-function":
        members, method = members[:2], "decision_function"
    fit_rows, test_rows = train_test_split(np.arange(y.size), test_size=0.3, stratify=y,
                                           random_state=0)
    ours = GroupStackingClassifier(members, final_estimator=LogisticRegression(max_iter=5000),
                                   n_inner_splits=4, stack_method=method,
                                   passthrough=passthrough, random_state=0)
    ours.fit(X[fit_rows], y[fit_rows],
             groups=None if case == "digits-no-groups" else groups[fit_rows])
    sk = StackingClassifier(members, final_estimator=LogisticRegression(max_iter=5000),
                            cv=ours.inner_splits_, stack_method=method,
                            passthrough=passthrough).fit(X[fit_rows], y[fit_rows])
    assert_array_equal(ours.predict_proba(X[test_rows]), sk.predict_proba(X[test_rows]))
    assert_array_equal(ours.predict(X[test_rows]), sk.predict(X[test_rows]))


@pytest.mark.parametrize("design", ["every-class-enough", "one-class-few", "few-participants",
                                    "no-groups"])
def test_inner_splits_are_sklearns_splitters(design):
    """Reference: scikit-learn 1.9.1 splitters. The rule (the brief): StratifiedGroupKFold
    (shuffle=True, random_state) when every class has >= n_inner_splits participants, else
    GroupKFold; with fewer participants than n_inner_splits, that many folds; without groups
    StratifiedKFold(shuffle=True, random_state). The splits must be exactly the splitter's."""
    X, y, groups = participant_table(10, 3)
    k = 4
    if design == "one-class-few":  # class 2 only from 3 participants
        keep = (y != 2) | np.isin(groups, np.unique(groups)[:3])
        X, y, groups = X[keep], y[keep], groups[keep]
        expected = GroupKFold(k).split(X, y, groups)
    elif design == "few-participants":
        keep = np.isin(groups, np.unique(groups)[:3])
        X, y, groups = X[keep], y[keep], groups[keep]
        expected = StratifiedGroupKFold(3, shuffle=True, random_state=11).split(X, y, groups)
    elif design == "no-groups":
        expected = StratifiedKFold(k, shuffle=True, random_state=11).split(X, y)
    else:
        expected = StratifiedGroupKFold(k, shuffle=True, random_state=11).split(X, y, groups)
    stack = GroupStackingClassifier([("lda", LinearDiscriminantAnalysis())], n_inner_splits=k,
                                    random_state=11)
    stack.fit(X, y, groups=None if design == "no-groups" else groups)
    expected = list(expected)
    assert len(stack.inner_splits_) == len(expected)
    for (train, test), (train_ref, test_ref) in zip(stack.inner_splits_, expected, strict=True):
        assert_array_equal(train, train_ref)
        assert_array_equal(test, test_ref)


@pytest.mark.parametrize("design", ["within-subject", "one-class-few"])
def test_stacking_out_of_fold_never_sees_the_predicted_participant(design):
    """Definition of grouped out-of-fold stacking (Wolpert 1992 stacked generalisation with
    grouped folds; common practice, no source): every inner prediction of a member comes from
    a copy fitted on rows of other participants only, every row is predicted exactly once,
    and the members kept for prediction are refitted on all rows. A RowSpy member records
    the rows each copy was fitted on and the rows it predicted; a real member (LDA) runs
    beside it. Both splitter branches (StratifiedGroupKFold, GroupKFold) are checked."""
    X, y, groups = participant_table(10, 3)
    if design == "one-class-few":
        keep = (y != 2) | np.isin(groups, np.unique(groups)[:3])
        X, y, groups = X[keep], y[keep], groups[keep]
        X[:, 0] = np.arange(y.size)  # row numbers of the kept rows
    stack = GroupStackingClassifier([("spy", RowSpy()), ("lda", LinearDiscriminantAnalysis())],
                                    n_inner_splits=4, random_state=0)
    SPY_LOG.clear()
    stack.fit(X, y, groups=groups)
    log = list(SPY_LOG)
    assert stack.inner_cv_ == ("GroupKFold" if design == "one-class-few"
                               else "StratifiedGroupKFold")
    assert len(log) == len(stack.inner_splits_) == 4
    for fitted_on, predicted in log:
        assert not set(groups[fitted_on]) & set(groups[predicted])
        assert_array_equal(np.sort(np.concatenate([fitted_on, predicted])), np.arange(y.size))
    assert_array_equal(np.sort(np.concatenate([p for _, p in log])), np.arange(y.size))
    assert_array_equal(np.sort(stack.named_estimators_["spy"].train_rows_), np.arange(y.size))
    assert stack.final_estimator_.n_features_in_ == 2 * 3  # two members x three classes


# --- scikit-learn estimator contract -------------------------------------------------------

@pytest.mark.parametrize("make", [
    lambda: GroupBaggingClassifier(DecisionTreeClassifier(), n_estimators=3,
                                   sample_by="window", random_state=0),
    lambda: GroupStackingClassifier([("tree", DecisionTreeClassifier(random_state=0)),
                                     ("logistic", LogisticRegression())],
                                    n_inner_splits=3, random_state=0),
], ids=["bagging-window", "stacking"])
@pytest.mark.filterwarnings("ignore::sklearn.exceptions.SkipTestWarning")
def test_sklearn_check_estimator(make):
    """Reference: scikit-learn 1.9.1 ``check_estimator`` (the estimator API contract: clone,
    get/set_params, fit idempotence, pickling, n_features_in_, errors on bad input). Bagging
    runs in window mode, the only mode usable without groups."""
    results = check_estimator(make(), on_fail=None)
    failed = [(r["check_name"], str(r["exception"])[:200]) for r in results
              if r["status"] == "failed"]
    assert failed == []


def test_nested_params_and_pipeline_groups(wine):
    """Reference: scikit-learn 1.9.1 composite-estimator conventions: nested parameters by
    ``<name>__<param>`` (members of a stacking by their names), ``clone`` keeps them, and a
    Pipeline routes ``model__groups`` to our fit (as cairn_science.learning.run does)."""
    X, y, groups = wine
    stack = GroupStackingClassifier(_members()[:2], n_inner_splits=3, random_state=0)
    stack.set_params(lda__shrinkage=0.3, logistic__C=0.5)
    assert stack.get_params()["lda__shrinkage"] == 0.3
    assert clone(stack).get_params()["logistic__C"] == 0.5
    bag = GroupBaggingClassifier(LogisticRegression(), n_estimators=3, random_state=0)
    bag.set_params(estimator__C=0.25)
    assert clone(bag).estimator.C == 0.25
    assert is_classifier(bag) and is_classifier(stack)
    pipe = Pipeline([("scale", StandardScaler()), ("model", bag)]).fit(X, y, model__groups=groups)
    assert {g for rows in pipe.named_steps["model"].draws_ for g in groups[rows]} <= set(groups)


def test_one_class_bootstrap_is_drawn_again_and_explained_when_it_stays(monkeypatch):
    """With between-subject labels and two participants, some participant bootstraps hold
    one class only: LogisticRegression cannot fit such a draw (scikit-learn 1.9.1 raises),
    LDA fits it but cannot give probabilities, a tree would only ever vote for that class.
    Such a draw is drawn again from the member's own seed, so every member sees both classes
    (one-class draws used to fail whole runs, e.g. in a permutation test's shuffled labels);
    a draw holding both classes is the plain draw of its seed. Without redraws the error
    names the field and says what to do (project rule)."""
    from cairn_science.learning import ensembles

    X, y, groups = participant_table(2, 2, between=True)
    units = np.unique(groups)
    plain_one_class = 0
    for learner in (LogisticRegression(), LinearDiscriminantAnalysis(),
                    DecisionTreeClassifier()):
        bag = GroupBaggingClassifier(learner, n_estimators=10, random_state=0).fit(
            X, y, groups=groups)
        assert all(np.unique(y[rows]).size == 2 for rows in bag.draws_)
        assert bag.predict_proba(X).shape == (len(y), 2)
        for seed, rows in zip(bag.seeds_, bag.draws_, strict=True):
            picked = np.random.RandomState(seed).randint(0, units.size, units.size)
            plain = np.concatenate([np.flatnonzero(groups == units[u]) for u in picked])
            if np.unique(y[plain]).size == 2:
                assert rows.tolist() == plain.tolist()
            else:
                plain_one_class += 1
    assert plain_one_class > 0  # the case happened
    monkeypatch.setattr(ensembles, "ONE_CLASS_REDRAWS", 0)
    with pytest.raises(ValueError, match="sample_by: member .* one class only"):
        GroupBaggingClassifier(LogisticRegression(), n_estimators=10,
                               random_state=0).fit(X, y, groups=groups)


@pytest.mark.parametrize("build, fit_kwargs, field", [
    (lambda: GroupBaggingClassifier(LogisticRegression(), n_estimators=0), {}, "n_estimators"),
    (lambda: GroupBaggingClassifier(LogisticRegression(), sample_by="subject"), {},
     "sample_by"),
    (lambda: GroupBaggingClassifier(LogisticRegression(), voting="mean"), {}, "voting"),
    (lambda: GroupBaggingClassifier(LinearSVC(), voting="soft"), {}, "voting"),
    (lambda: GroupBaggingClassifier(LogisticRegression()), {"groups": None}, "groups"),
    (lambda: GroupBaggingClassifier(LogisticRegression()), {"groups": np.zeros(3)}, "groups"),
    (lambda: GroupStackingClassifier([]), {}, "estimators"),
    (lambda: GroupStackingClassifier([("a", LogisticRegression()), ("a", LinearSVC())]), {},
     "estimators"),
    (lambda: GroupStackingClassifier([("a", LogisticRegression())], stack_method="proba"), {},
     "stack_method"),
    (lambda: GroupStackingClassifier([("a", LinearSVC())]), {}, "stack_method"),
    (lambda: GroupStackingClassifier([("a", LogisticRegression())], n_inner_splits=1), {},
     "n_inner_splits"),
    (lambda: GroupStackingClassifier([("a", LogisticRegression())]),
     {"groups": np.array(["P1"] * 178)}, "groups"),
])
def test_bad_input_names_the_field(wine, build, fit_kwargs, field):
    """Project rule: errors for bad input name the field and say what to do."""
    X, y, groups = wine
    kwargs = {"groups": groups, **fit_kwargs}
    with pytest.raises(ValueError, match=field):
        build().fit(X, y, **kwargs)


# --- skops release and model digest -------------------------------------------------------

def _forest_bagging(wine, seed=0):
    X, y, groups = wine
    member = RandomForestClassifier(n_estimators=4, max_depth=3, random_state=0)
    return GroupBaggingClassifier(member, n_estimators=3, random_state=seed).fit(
        X, y, groups=groups)


def _forest_stacking(wine, seed=0):
    X, y, groups = wine
    members = [("forest", RandomForestClassifier(n_estimators=4, max_depth=3, random_state=seed)),
               ("lda", LinearDiscriminantAnalysis())]
    return GroupStackingClassifier(members, n_inner_splits=3, random_state=seed).fit(
        X, y, groups=groups)


@pytest.mark.parametrize("build, ours", [(_forest_bagging, BAGGING), (_forest_stacking, STACKING)],
                         ids=["bagging", "stacking"])
def test_skops_round_trip_with_explicit_trust(wine, build, ours):
    """Reference: skops 0.16.0 -- ``get_untrusted_types`` lists the types a file needs that
    skops does not trust by default (our classes by full path, and scikit-learn's Cython
    Tree, per FIELD-NOTES); ``loads(..., trusted=[...])`` with that list restores a model
    with exactly the same predictions (exact: the same arrays are restored); without the
    list, skops refuses (UntrustedTypesFoundException) and so does load_release
    (ValueError naming our class)."""
    X = wine[0]
    model = build(wine)
    data = skops_bytes(model)
    untrusted = trusted_types(data)
    assert untrusted == skops.io.get_untrusted_types(data=data)
    assert ours in untrusted and TREE in untrusted
    loaded = load_release(data, untrusted)
    assert type(loaded) is type(model)
    assert_array_equal(loaded.predict_proba(X), model.predict_proba(X))
    assert_array_equal(loaded.predict(X), model.predict(X))
    with pytest.raises(skops.io.exceptions.UntrustedTypesFoundException):
        skops.io.loads(data)
    with pytest.raises(ValueError, match=ours.rsplit(".", 1)[1]):
        load_release(data, [t for t in untrusted if t != ours])


@pytest.mark.parametrize("build", [_forest_bagging, _forest_stacking], ids=["bagging", "stacking"])
def test_model_digest_is_content_not_file(wine, build):
    """Reference: skops 0.16.0 behaviour (FIELD-NOTES: two dumps of one model differ
    byte-wise). Properties: two fits with the same seed -> the same digest; the two dumps
    differ as files, yet the models loaded from them have the same digest, equal to the
    original's; another seed -> another digest."""
    first, second, other = build(wine, 0), build(wine, 0), build(wine, 1)
    assert model_digest(first) == model_digest(second)
    assert model_digest(first) != model_digest(other)
    dump_a, dump_b = skops_bytes(first), skops_bytes(first)
    assert dump_a != dump_b
    trust = trusted_types(dump_a)
    loaded_a, loaded_b = load_release(dump_a, trust), load_release(dump_b, trust)
    assert model_digest(loaded_a) == model_digest(loaded_b) == model_digest(first)


def test_model_digest_same_in_another_process(wine):
    """Property (no external source): the digest must not depend on the process -- object
    ids, string hashing (PYTHONHASHSEED), set or dict order. The same fit in a fresh
    interpreter with another hash seed gives the same digest."""
    code = ("import numpy as np; from sklearn.datasets import load_wine; "
            "from sklearn.preprocessing import StandardScaler; "
            "from tests.unit.test_learning_ensembles import _forest_bagging; "
            "from cairn_science.learning.canonical import model_digest; "
            "X, y = load_wine(return_X_y=True); "
            "wine = (StandardScaler().fit_transform(X), y, np.arange(y.size) % 12); "
            "print(model_digest(_forest_bagging(wine)))")
    env = {**os.environ, "PYTHONHASHSEED": "12345", "PYTHONPATH": str(REPO)}
    out = subprocess.run([sys.executable, "-c", code], cwd=REPO, env=env, capture_output=True,
                         text=True, timeout=120, check=True)
    assert out.stdout.strip() == model_digest(_forest_bagging(wine))


def test_model_digest_ignores_padding_and_key_order():
    """Closed form: a structured array's padding bytes are not content (numpy aligned dtype:
    a uint8 field then a float64 leaves 7 bytes of padding), and a mapping's content does not
    depend on insertion order. Equal content -> equal digest; a changed value -> changed."""
    dtype = np.dtype([("flag", "u1"), ("value", "f8")], align=True)
    assert dtype.itemsize == 16
    a = np.zeros(3, dtype=dtype)
    a["flag"], a["value"] = [1, 0, 1], [0.5, 1.5, 2.5]
    b = a.copy()
    b.view(np.uint8).reshape(3, 16)[:, 1:8] = 0xAB  # padding only
    assert a.tobytes() != b.tobytes()
    assert model_digest(a) == model_digest(b)
    assert model_digest({"x": 1, "y": a}) == model_digest({"y": b, "x": 1})
    b["value"][0] = 0.25
    assert model_digest(a) != model_digest(b)


# --- learners -------------------------------------------------------------------------------

def test_learner_table():
    """The brief's configuration of each learner (no external source) and the project rule
    that none starts processes of its own (n_jobs unset)."""
    assert set(LEARNERS) == {"lda", "logistic", "linear_svm", "rbf_svm", "knn", "random_forest",
                             "extra_trees", "hist_gradient_boosting", "mlp", "gru", "lstm",
                             "bigru", "bilstm"}
    params = {name: make_learner(name).get_params() for name in LEARNERS}
    assert params["lda"]["solver"] == "lsqr" and params["lda"]["shrinkage"] == "auto"
    assert params["linear_svm"]["estimator__kernel"] == "linear"
    assert params["rbf_svm"]["estimator__kernel"] == "rbf"
    assert {n for n, learner in LEARNERS.items() if learner.grouped} == {"linear_svm", "rbf_svm"}
    assert params["knn"]["n_neighbors"] == 15
    assert params["mlp"]["early_stopping"] is False
    for name, p in params.items():
        assert p.get("n_jobs") in (None, 1), name
        assert LEARNERS[name].name == name and LEARNERS[name].description


@pytest.mark.parametrize("name", sorted(LEARNERS))
def test_every_learner_fits_predicts_and_round_trips(wine, name):
    """Common practice, no source: wine (3 cultivars, 13 chemical measures) is close to
    linearly separable once standardised, so every learner should classify a stratified
    held-out half far above chance (1/3); threshold 0.8 (measured 0.92-0.99). predict_proba
    rows sum to 1 (atol 1e-9: float rounding). The same random_state fits the same model
    (equal probabilities and model_digest); predicting leaves the digest alone (k-NN's
    search tree counts its queries; those counters are not content); and the skops release
    (trusting exactly what trusted_types lists) predicts identically with the same digest."""
    X, y, groups = wine
    if reads_sequences(make_learner(name)):  # a recurrent learner: each row a recording of
        X = with_sequence_keys(X, np.arange(y.size), np.zeros(y.size))  # one window
    fit_rows, test_rows = train_test_split(np.arange(y.size), test_size=0.5, stratify=y,
                                           random_state=0)
    kwargs = {"groups": groups[fit_rows]} if LEARNERS[name].grouped else {}
    with warnings.catch_warnings():
        warnings.simplefilter("error", category=UserWarning)  # e.g. convergence
        warnings.simplefilter("error", category=FutureWarning)  # e.g. deprecated parameters
        model = make_learner(name, random_state=0).fit(X[fit_rows], y[fit_rows], **kwargs)
    digest = model_digest(model)
    again = make_learner(name, random_state=0).fit(X[fit_rows], y[fit_rows], **kwargs)
    proba = model.predict_proba(X[test_rows])
    np.testing.assert_allclose(proba.sum(axis=1), 1.0, rtol=0, atol=1e-9)
    assert np.mean(model.predict(X[test_rows]) == y[test_rows]) >= 0.8
    assert_array_equal(again.predict_proba(X[test_rows]), proba)
    assert model_digest(model) == digest  # predicting does not change the model
    assert model_digest(again) == digest
    data = skops_bytes(model)
    loaded = load_release(data, trusted_types(data))
    assert_array_equal(loaded.predict_proba(X[test_rows]), proba)
    assert model_digest(loaded) == model_digest(model)


def test_make_learner_errors_name_the_parameter():
    """Project rule: errors name the field and say what to do. The parameter list comes from
    the scikit-learn estimator's get_params() (scikit-learn 1.9.1)."""
    with pytest.raises(ValueError, match=r"unknown learner 'svm'.*lda.*mlp"):
        make_learner("svm")
    with pytest.raises(ValueError, match=r"no parameter 'n_trees'.*n_estimators"):
        make_learner("random_forest", {"n_trees": 10})
    with pytest.raises(ValueError, match=r"random_state"):
        make_learner("logistic", {"random_state": 3})
    with pytest.raises(ValueError, match=r"params"):
        make_learner("lda", [("shrinkage", 0.1)])
    assert make_learner("lda", {"shrinkage": 0.2}).shrinkage == 0.2
    assert make_learner("extra_trees", random_state=4).random_state == 4


# --- internal splits ------------------------------------------------------------------------

def _row_data(n_participants=10, per=12, seed=0):
    """Two informative features and a last one that carries the row number (scaled to be
    negligible), so that a spy can tell which rows a fit saw; participant = row // per."""
    rng = np.random.default_rng(seed)
    n = n_participants * per
    y = np.tile(np.repeat([0, 1], per // 2), n_participants)
    X = np.column_stack([rng.normal(y, 1.0), rng.normal(-y, 1.0), np.arange(n) * 1e-6])
    return X, y, np.arange(n) // per


def _rows(X):
    return np.rint(np.asarray(X)[:, -1] * 1e6).astype(int)  # the last column


def test_no_learner_splits_windows_internally(monkeypatch):
    """Sources: scikit-learn 1.9.1's documentation -- MLPClassifier and
    HistGradientBoostingClassifier with ``early_stopping`` set aside ``validation_fraction``
    of the training rows (a split of rows, stratified by class, blind to groups); SVC's
    ``probability=True`` calibrates by an internal 5-fold cross-validation of rows (libsvm);
    ``CalibratedClassifierCV`` takes ``cv`` as an iterable of (train, test) splits. Windows
    of one participant on both sides of such a split make the probabilities or the stopping
    point optimistic (Varoquaux et al. 2017, NeuroImage 145:166, from memory).

    Every learner as configured: no early stopping, no libsvm probabilities; the learners
    whose probabilities are calibrated are fitted through every path that fits them (alone,
    as bagging members drawn by participant, as stacking members on inner folds and refitted,
    and as the meta-learner), and a spy on CalibratedClassifierCV.fit checks, from the row
    numbers it was given, that no calibration split puts one participant on both sides."""
    X, y, groups = _row_data()
    for name, learner in LEARNERS.items():
        for key, value in make_learner(name).get_params(deep=True).items():
            leaf = key.rsplit("__", 1)[-1]
            if leaf == "early_stopping":
                assert value is False, name
            if leaf == "probability":
                assert value in (False, "deprecated"), name
        for key, _ in learner.refused:
            with pytest.raises(ValueError, match=f"does not take '{key}'.*leave it out"):
                make_learner(name, {key: True})

    seen = []
    original = __import__("sklearn.calibration", fromlist=["x"]).CalibratedClassifierCV.fit

    def spy(self, X_fit, y_fit, *args, **kwargs):
        rows = _rows(X_fit)
        seen.append([(rows[train], rows[test]) for train, test in self.cv])
        return original(self, X_fit, y_fit, *args, **kwargs)

    monkeypatch.setattr("sklearn.calibration.CalibratedClassifierCV.fit", spy)
    grouped = [name for name, learner in LEARNERS.items() if learner.grouped]
    fits = []
    for name in grouped:
        fits.append(make_learner(name, random_state=1).fit(X, y, groups=groups))
        fits.append(GroupBaggingClassifier(make_learner(name), n_estimators=3,
                                           random_state=2).fit(X, y, groups=groups))
        fits.append(GroupStackingClassifier(
            [("svm", make_learner(name)), ("lda", make_learner("lda"))],
            final_estimator=make_learner(name), n_inner_splits=3, passthrough=True,
            random_state=3).fit(X, y, groups=groups))  # passthrough: the meta-learner's
        # input ends with X's columns, so the spy reads its row numbers too
    # alone 1; bagging 3 members; stacking 3 inner + 1 refit of the member, 1 meta-learner.
    assert len(seen) == len(grouped) * (1 + 3 + 3 + 1 + 1)
    for splits in seen:
        assert len(splits) >= 2
        for train, test in splits:
            assert train.size and test.size
            assert not set(groups[train].tolist()) & set(groups[test].tolist())
    proba = fits[0].predict_proba(X)
    np.testing.assert_allclose(proba.sum(axis=1), 1.0, rtol=0, atol=1e-9)
    with pytest.raises(ValueError, match="groups.*participant of every row"):
        make_learner("linear_svm").fit(X, y)


def test_grouped_calibration_is_scikit_learns_on_the_grouped_folds():
    """Reference: scikit-learn 1.9.1 ``CalibratedClassifierCV(SVC(), method="sigmoid",
    cv=splits, ensemble=True)`` on the same participant-grouped inner folds
    (``StratifiedGroupKFold`` via cairn_science.learning.validation.inner_splits), and ``SVC``
    fitted on all rows for predict and decision_function: equal to the last bit."""
    from sklearn.calibration import CalibratedClassifierCV
    from sklearn.svm import SVC

    from cairn_science.learning.validation import inner_splits

    X, y, groups = _row_data(seed=4)
    ours = GroupCalibratedClassifier(SVC(kernel="linear"), n_inner_splits=4,
                                     random_state=5).fit(X, y, groups=groups)
    seed = np.random.RandomState(5).randint(np.iinfo(np.int32).max)
    splits = inner_splits(y, groups, n_splits=4, seed=seed)
    reference = CalibratedClassifierCV(SVC(kernel="linear"), method="sigmoid", cv=splits,
                                       ensemble=True).fit(X, y)
    assert_array_equal(ours.predict_proba(X), reference.predict_proba(X))
    full = SVC(kernel="linear").fit(X, y)
    assert_array_equal(ours.predict(X), full.predict(X))
    assert_array_equal(ours.decision_function(X), full.decision_function(X))
    assert is_classifier(ours) and list(ours.classes_) == [0, 1]
