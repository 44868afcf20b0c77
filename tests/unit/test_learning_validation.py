"""The outer and inner validation splits against scikit-learn 1.9.1's splitters, and the
leakage that participant grouping exists to prevent, on generated data."""

import numpy as np
import pytest
from sklearn.datasets import load_digits, load_wine
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import balanced_accuracy_score
from sklearn.model_selection import (
    GroupKFold,
    KFold,
    LeaveOneGroupOut,
    StratifiedGroupKFold,
)

from cairn_science.learning.validation import (
    SCHEMES,
    Fold,
    Scheme,
    SchemeError,
    assert_disjoint,
    describe_outer,
    inner_splits,
    outer_folds,
)

pytestmark = pytest.mark.filterwarnings("ignore::UserWarning")


def _fingerprint_data(seed, *, n_participants=12, n_windows=40, n_features=20, offset_sd=3.0):
    """Windows that carry a strong per-participant offset (the fingerprint) and no label
    signal at all; labels are constant per participant, half the participants each class."""
    rng = np.random.default_rng(seed)
    offsets = rng.normal(0.0, offset_sd, (n_participants, n_features))
    x = np.repeat(offsets, n_windows, axis=0) + rng.normal(
        0.0, 1.0, (n_participants * n_windows, n_features))
    half = n_participants // 2
    per_participant = rng.permutation(np.array(["A"] * half + ["B"] * (n_participants - half)))
    y = np.repeat(per_participant, n_windows)
    participants = np.repeat([f"site1/p{i:02d}" for i in range(n_participants)], n_windows)
    return x, y, participants


def _out_of_fold(x, y, splits):
    pred = np.empty_like(y)
    for train, test in splits:
        model = LogisticRegression(max_iter=1000).fit(x[train], y[train])
        pred[test] = model.predict(x[test])
    return pred


def _splits_equal(ours, reference):
    assert len(ours) == len(reference)
    for (train, test), (ref_train, ref_test) in zip(ours, reference, strict=True):
        np.testing.assert_array_equal(train, np.sort(ref_train))
        np.testing.assert_array_equal(test, np.sort(ref_test))


# --------------------------------------------------------------------------- leakage


def test_grouped_kfold_is_at_chance_where_window_kfold_leaks_the_participant():
    """Common practice, no source; Saeb et al. 2017 (GigaScience, from memory) on record-wise
    versus subject-wise cross-validation.

    Labels are constant per participant and unrelated to the features, but every participant
    has a strong offset in 20 features. Shuffled KFold on windows puts windows of each
    participant in training and test, so the model recognises the person and with it the
    label: balanced accuracy far above chance (> 0.8). Grouped k-fold never shows a test
    person in training and must stay at chance.

    Tolerance: with labels constant per participant and predictions nearly constant per
    participant, one data set's balanced accuracy behaves like a proportion over 12
    participants, binomial SD sqrt(0.25 / 12) = 0.14, more as folds share training people
    (about 0.2 seen here). One data set cannot be held to +/-0.15, so the mean over 30
    independent data sets is: its SD is 0.14 to 0.2 / sqrt(30) = 0.026 to 0.037, and 0.15
    also leaves room for the known negative bias of leave-groups-out CV on null data
    (holding out a class-A person leaves training with more B; about -0.05 here).
    """
    grouped, windowed = [], []
    for seed in range(30):
        x, y, participants = _fingerprint_data(seed)
        folds = outer_folds(Scheme("grouped_kfold"), y=y, participants=participants,
                            seed=seed)
        assert_disjoint(folds, participants)
        pred = _out_of_fold(x, y, [(f.train, f.test) for f in folds])
        grouped.append(balanced_accuracy_score(y, pred))
        leaky = KFold(5, shuffle=True, random_state=seed).split(x)
        windowed.append(balanced_accuracy_score(y, _out_of_fold(x, y, leaky)))
    assert abs(np.mean(grouped) - 0.5) < 0.15, np.mean(grouped)
    assert min(windowed) > 0.8, windowed


# --------------------------------------------------------------------------- grouped_kfold


def test_grouped_kfold_equals_stratified_group_kfold_on_wine():
    """Reference: scikit-learn 1.9.1 StratifiedGroupKFold(n_splits, shuffle=True,
    random_state=seed + repeat), on sklearn's bundled wine data with invented groups (178
    rows, 3 classes, 20 groups, so every class is in at least 5 groups). Indices identical."""
    x, y = load_wine(return_X_y=True)
    groups = np.random.default_rng(7).integers(0, 20, y.size).astype(str)
    scheme = Scheme("grouped_kfold", n_splits=5, n_repeats=2)
    folds = outer_folds(scheme, y=y, participants=groups, seed=11)
    assert describe_outer(scheme, y=y, participants=groups, seed=11)["stratified"] is True
    reference = []
    for repeat in range(2):
        splitter = StratifiedGroupKFold(5, shuffle=True, random_state=11 + repeat)
        reference.extend(splitter.split(x, y, groups))
    _splits_equal([(f.train, f.test) for f in folds], reference)
    assert [f.index for f in folds] == list(range(10))
    assert [f.repeat for f in folds] == [0] * 5 + [1] * 5
    for fold in folds:
        assert fold.held_out == tuple(sorted(set(groups[fold.test])))
    assert_disjoint(folds, groups)


def test_grouped_kfold_falls_back_to_group_kfold_on_digits():
    """Reference: scikit-learn 1.9.1 GroupKFold(n_splits, shuffle=True, random_state=seed),
    used when a class is in fewer participants than folds: on sklearn's bundled digits with
    invented groups, digit 0 recorded in only 3 of 40 groups. Indices identical, and the
    description names the short class."""
    x, y = load_digits(return_X_y=True)
    rng = np.random.default_rng(3)
    groups = np.where(y == 0, rng.integers(0, 3, y.size), rng.integers(3, 40, y.size))
    groups = np.array([f"g{g:02d}" for g in groups])
    scheme = Scheme("grouped_kfold", n_splits=5)
    info = describe_outer(scheme, y=y, participants=groups, seed=4)
    assert info["stratified"] is False and info["splitter"] == "GroupKFold"
    assert "class 0 is seen in 3 participant(s)" in info["stratification_note"]
    folds = outer_folds(scheme, y=y, participants=groups, seed=4)
    reference = list(GroupKFold(5, shuffle=True, random_state=4).split(x, y, groups))
    _splits_equal([(f.train, f.test) for f in folds], reference)
    assert_disjoint(folds, groups)


def test_grouped_kfold_refuses_too_few_participants():
    """Closed form: k grouped folds need k groups. Common practice, no source."""
    y = np.array(["A", "B"] * 6)
    participants = np.repeat(["p1", "p2", "p3"], 4)
    with pytest.raises(SchemeError, match="grouped_kfold with 5 folds needs at least 5 "
                                          "participants; the data have 3"):
        outer_folds(Scheme("grouped_kfold"), y=y, participants=participants)


def test_a_class_held_by_one_participant_is_refused_naming_it():
    """Common practice, no source: a fold whose training part lacks a class cannot learn it;
    with leave-one-participant-out, a class recorded in one participant always does."""
    y = np.array(["A", "A", "A", "B", "B", "A", "C", "C"])
    participants = np.repeat(["p1", "p2", "p3", "p4"], 2)
    with pytest.raises(SchemeError, match="class 'C' is absent from the training part "
                                          "because it is recorded only in p4"):
        outer_folds(Scheme("leave_one_participant_out"), y=y, participants=participants)


# --------------------------------------------------------------------------- leave one out


def _sites_data():
    rng = np.random.default_rng(5)
    sites = np.repeat(["s1", "s2", "s3"], 40)
    participants = np.array([f"{s}/p{i // 10}" for i, s in enumerate(sites)])
    y = rng.choice(["low", "high"], size=sites.size)
    return y, participants, sites


def test_leave_one_participant_out_equals_leave_one_group_out():
    """Reference: scikit-learn 1.9.1 LeaveOneGroupOut on participants. Each fold holds out
    exactly one participant, absent from its training part."""
    y, participants, sites = _sites_data()
    folds = outer_folds(Scheme("leave_one_participant_out"), y=y, participants=participants,
                        sites=sites)
    reference = list(LeaveOneGroupOut().split(y, y, participants))
    _splits_equal([(f.train, f.test) for f in folds], reference)
    assert len(folds) == np.unique(participants).size == 12
    for fold in folds:
        assert len(fold.held_out) == 1
        assert fold.held_out[0] not in set(participants[fold.train])
    assert_disjoint(folds, participants)


def test_leave_one_site_out_holds_out_whole_sites():
    """Reference: scikit-learn 1.9.1 LeaveOneGroupOut on sites. No site and no participant
    is in both parts of a fold."""
    y, participants, sites = _sites_data()
    folds = outer_folds(Scheme("leave_one_site_out"), y=y, participants=participants,
                        sites=sites)
    reference = list(LeaveOneGroupOut().split(y, y, sites))
    _splits_equal([(f.train, f.test) for f in folds], reference)
    assert [f.held_out for f in folds] == [("s1",), ("s2",), ("s3",)]
    for fold in folds:
        assert not set(sites[fold.train]) & set(sites[fold.test])
    assert_disjoint(folds, participants)


def test_leave_one_out_schemes_refuse_a_single_group():
    """Common practice, no source: leaving one group out needs a second group to train on;
    the messages name the scheme and the count."""
    y, participants, _ = _sites_data()
    with pytest.raises(SchemeError, match="leave_one_site_out needs at least 2 sites; "
                                          "the data have 1"):
        outer_folds(Scheme("leave_one_site_out"), y=y, participants=participants,
                    sites=np.repeat("s1", y.size))
    with pytest.raises(SchemeError, match="leave_one_site_out needs sites"):
        outer_folds(Scheme("leave_one_site_out"), y=y, participants=participants)
    with pytest.raises(SchemeError, match="leave_one_participant_out needs at least 2 "
                                          "participants; the data have 1"):
        outer_folds(Scheme("leave_one_participant_out"), y=y,
                    participants=np.repeat("s1/p0", y.size))


# --------------------------------------------------------------------------- within participant


def test_within_participant_time_one_recording_leaves_a_gap_of_one_window():
    """Sources: Roberts et al. 2017, Ecography 40:913 ("Cross-validation strategies for data
    with temporal, spatial, hierarchical, or phylogenetic structure": blocked splits with a
    buffer between training and test blocks) and Varoquaux et al. 2017, NeuroImage 145:166
    (test data must be independent of training data), both from memory; the window
    arithmetic is common practice, no source.

    4 s windows with 50 % overlap (a 2 s step) on one recording per participant: windows
    whose starts differ by less than 4 s share samples. The test part is the last 25 % of
    each participant's windows (rounded half up: 10 of 40, 3 of 10); training windows must
    end at least one window length (4 s) before the first test window starts, so none
    shares a sample with any test window of the recording. Rows are shuffled so that row
    order and time order differ."""
    rng = np.random.default_rng(9)
    window_s, step_s = 4.0, 2.0
    sizes = {"a/p1": 40, "a/p2": 10, "b/p1": 40}
    participants = np.concatenate([np.repeat(p, n) for p, n in sizes.items()])
    times = np.concatenate([np.arange(n) * step_s for n in sizes.values()])
    y = rng.choice(["low", "high"], size=participants.size)
    shuffle = rng.permutation(participants.size)
    participants, times, y = participants[shuffle], times[shuffle], y[shuffle]

    scheme = Scheme("within_participant_time", test_share=0.25)
    (fold,) = outer_folds(scheme, y=y, participants=participants, order=times,
                          recordings=np.zeros(participants.size, dtype=int),
                          window_s=window_s)
    assert not set(fold.train.tolist()) & set(fold.test.tolist())
    for p, n_test in (("a/p1", 10), ("a/p2", 3), ("b/p1", 10)):
        own = participants == p
        train_t, test_t = times[fold.train][own[fold.train]], times[fold.test][own[fold.test]]
        assert test_t.size == n_test and train_t.size
        assert np.all(test_t >= np.sort(times[own])[-n_test])  # the latest windows
        # No training window [t, t + 4 s) overlaps any test window of the recording ...
        ends = train_t[:, None] + window_s
        assert np.all((ends <= test_t[None, :]) | (test_t[None, :] + window_s <= train_t[:, None]))
        # ... and one window length of signal lies between the two parts.
        assert train_t.max() + window_s + window_s <= test_t.min()
        # Only the windows inside the gap are left out: 2 windows at a 2 s step.
        assert own.sum() - train_t.size - test_t.size == int(2 * window_s / step_s) - 1
    assert fold.held_out == ("a/p1", "a/p2", "b/p1")
    assert scheme.grouped is False
    assert "not generalisation to new people" in scheme.warning
    assert "one window length" in scheme.warning  # the rule, in the words the page shows
    assert describe_outer(scheme, y=y, participants=participants)["splitter"] in scheme.warning
    assert all(Scheme(name).warning == "" for name in SCHEMES if name != scheme.name)
    with pytest.raises(AssertionError, match="participant 'a/p1' is in both"):
        assert_disjoint([fold], participants)
    assert_disjoint([fold], participants, scheme=scheme)  # skipped: not grouped by design
    with pytest.raises(SchemeError, match="needs order"):
        outer_folds(scheme, y=y, participants=participants)
    with pytest.raises(SchemeError, match="pass window_s="):
        outer_folds(scheme, y=y, participants=participants, order=times)
    short = participants == "a/p2"
    with pytest.raises(SchemeError, match="'a/p2' has one recording too short"):
        outer_folds(Scheme("within_participant_time", test_share=0.75), y=y[short],
                    participants=participants[short], order=times[short], window_s=8.0)


def test_within_participant_time_splits_whole_recordings_and_sessions():
    """Common practice, no source (Roberts et al. 2017, Ecography, from memory: hold out
    whole blocks). A participant with several recordings is split by recording: each
    recording lies wholly in the training or the test part, and the test recordings are the
    participant's latest (highest rank); several sessions are split by session. Window start
    times restart at 0 in every recording, so a split by start time alone would mix them."""
    rng = np.random.default_rng(3)
    rows = []
    # p1: one session, 3 recordings of 10 windows; p2: 2 sessions x 2 recordings of 6.
    for rec in range(3):
        rows += [("s/p1", 0, rec, t * 2.0) for t in range(10)]
    for ses in range(2):
        for rec in range(2):
            rows += [("s/p2", ses, 10 + 2 * ses + rec, t * 2.0) for t in range(6)]
    participants = np.array([r[0] for r in rows])
    sessions = np.array([r[1] for r in rows])
    recordings = np.array([r[2] for r in rows])
    times = np.array([r[3] for r in rows])
    y = rng.choice(["low", "high"], size=participants.size)
    y[:2] = ["low", "high"]
    shuffle = rng.permutation(participants.size)
    participants, sessions, recordings, times, y = (a[shuffle] for a in (
        participants, sessions, recordings, times, y))

    (fold,) = outer_folds(Scheme("within_participant_time", test_share=0.25), y=y,
                          participants=participants, order=times, recordings=recordings,
                          sessions=sessions, window_s=4.0)
    np.testing.assert_array_equal(np.sort(np.concatenate([fold.train, fold.test])),
                                  np.arange(participants.size))  # no gap between recordings
    test_recordings = set(recordings[fold.test].tolist())
    assert not test_recordings & set(recordings[fold.train].tolist())
    assert test_recordings == {2, 12, 13}  # p1's latest recording; p2's latest session
    assert set(sessions[fold.test][participants[fold.test] == "s/p2"].tolist()) == {1}


# --------------------------------------------------------------------------- inner splits


def test_inner_splits_equal_sklearn_and_shrink_to_the_participants():
    """Reference: scikit-learn 1.9.1 StratifiedGroupKFold(shuffle=True, random_state=seed);
    with 3 participants and n_splits=5 the folds shrink to 3 (GroupKFold: every class has
    only 3 participants), one participant per test part. Fewer than 2 participants is
    refused."""
    x, y = load_wine(return_X_y=True)
    groups = np.random.default_rng(1).integers(0, 15, y.size).astype(str)
    ours = inner_splits(y, groups, n_splits=4, seed=2)
    _splits_equal(ours, list(StratifiedGroupKFold(4, shuffle=True, random_state=2)
                             .split(x, y, groups)))

    y3 = np.array(["A", "B"] * 9)
    g3 = np.repeat(["p1", "p2", "p3"], 6)
    small = inner_splits(y3, g3, n_splits=5, seed=0)
    assert len(small) == 3
    assert sorted(tuple(np.unique(g3[test])) for _, test in small) == [("p1",), ("p2",),
                                                                        ("p3",)]
    for train, test in small:
        assert not set(g3[train]) & set(g3[test])
    with pytest.raises(SchemeError, match="at least 2 participants"):
        inner_splits(y3[:6], g3[:6])


# --------------------------------------------------------------------------- inputs


def test_bad_scheme_parameters_name_the_field():
    """Common practice, no source: errors name the field and the allowed values."""
    with pytest.raises(SchemeError, match="name: give one of .*'grouped_kfold'.*got 'kfold'"):
        Scheme("kfold")
    with pytest.raises(SchemeError, match="n_splits: give a whole number of at least 2; got 1"):
        Scheme("grouped_kfold", n_splits=1)
    with pytest.raises(SchemeError, match="n_splits: give a whole number of at least 2; "
                                          "got 'five'"):
        Scheme("grouped_kfold", n_splits="five")
    with pytest.raises(SchemeError, match="test_share: give a number above 0 and below 1"):
        Scheme("within_participant_time", test_share=1.0)
    with pytest.raises(SchemeError, match="participants must have one value per row"):
        outer_folds(Scheme("grouped_kfold"), y=["A", "B"], participants=["p1"])


def test_assert_disjoint_names_the_shared_participant():
    """Common practice, no source: a hand-made leaking fold is caught and named."""
    participants = np.array(["p1", "p1", "p2", "p2"])
    bad = Fold(index=3, repeat=0, train=np.array([0, 2]), test=np.array([1, 3]),
               held_out=("p1", "p2"))
    with pytest.raises(AssertionError, match="fold 3 .*participant 'p1'"):
        assert_disjoint([bad], participants)
