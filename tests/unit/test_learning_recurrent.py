"""Recurrent learners over a recording's window sequence: which windows make each row's
sequence (never another recording's, never another part of the fold's), the scikit-learn
interface (clone, parameters, the participant-grouped ensembles), determinism, and the
release round trip through skops with explicit trusted types.

Sources: the confinement rule (a test row's input holds nothing from outside its own part)
is common practice, no source; PyTorch 2.13's ``nn.GRU`` / ``nn.LSTM`` are the reference for
the network (a forward pass rebuilt here by hand from the stored numpy weights, with the
gate equations of PyTorch's documentation, must give the learner's probabilities); the
tables are invented, for plumbing.
"""

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from sklearn.base import clone
from sklearn.linear_model import LogisticRegression

from cairn_science.learning import recurrent
from cairn_science.learning import run as run_module
from cairn_science.learning.canonical import load_release, skops_bytes, trusted_types
from cairn_science.learning.ensembles import GroupBaggingClassifier, GroupStackingClassifier
from cairn_science.learning.recurrent import (
    CurrentWindow,
    RecurrentClassifier,
    sequence_rows,
    with_sequence_keys,
)
from cairn_science.learning.spec import TrainingSpec

pytest.importorskip("torch")

RECURRENT = "cairn_science.learning.recurrent.RecurrentClassifier"
TINY = {"hidden": (4, 3), "n_windows": 3, "epochs": 3, "batch_size": 16}
KINDS = [("gru", False), ("lstm", False), ("gru", True), ("lstm", True)]
FEATURES = ["alpha.relative_power.Pz", "theta.relative_power.Fz"]


def sequences_table(n_recordings=8, per=12, seed=0):
    """Windows of several recordings, rows shuffled; class = recording parity, and the
    class shows in the features only as a slow drift within the recording (so a sequence
    helps)."""
    rng = np.random.default_rng(seed)
    X, y, rec, start = [], [], [], []
    for r in range(n_recordings):
        for w in range(per):
            drift = (w / per) * (1.0 if r % 2 else -1.0)
            X.append(rng.normal(0, 0.5, 3) + drift)
            y.append(("low", "high")[r % 2])
            rec.append(r)
            start.append(2.0 * w)
    order = rng.permutation(len(y))
    X = with_sequence_keys(np.array(X)[order], np.array(rec)[order], np.array(start)[order])
    return X, np.array(y)[order], np.array(rec)[order] // 2  # two recordings per person


def test_sequence_rows_worked_by_hand():
    """Two recordings interleaved and out of order; recording 5's first windows are padded
    with its own earliest window; a window given twice (rows 3 and 6) is one window, the
    first of its rows standing for it."""
    recordings = np.array([5, 9, 5, 5, 9, 5, 5])
    starts = np.array([4.0, 0.0, 0.0, 2.0, 2.0, 6.0, 2.0])
    # recording 5 in time order: row 2 (0 s), row 3 (2 s; row 6 the same window), row 0
    # (4 s), row 5 (6 s); recording 9: row 1 (0 s), row 4 (2 s)
    assert_array_equal(sequence_rows(recordings, starts, 3), [
        [2, 3, 0], [1, 1, 1], [2, 2, 2], [2, 2, 3], [1, 1, 4], [3, 0, 5], [2, 2, 3]])
    assert_array_equal(sequence_rows(recordings, starts, 1), np.arange(7)[[0, 1, 2, 3, 4, 5, 3]]
                       .reshape(-1, 1))


def test_bad_keys_and_parameters_are_named():
    with pytest.raises(ValueError, match="one recording id and one window start per row"):
        with_sequence_keys(np.zeros((3, 2)), [0, 0], [0, 1, 2])
    X, y, _ = sequences_table()
    with pytest.raises(ValueError, match="cell: choose one of 'gru', 'lstm'"):
        RecurrentClassifier(cell="rnn").fit(X, y)
    with pytest.raises(ValueError, match="hidden: give a whole number >= 1"):
        RecurrentClassifier(hidden=(8, 0)).fit(X, y)
    with pytest.raises(ValueError, match="sequence-key columns"):
        RecurrentClassifier(**TINY).fit(X[:, :2], y)


def timed_table(n_people=6, n_windows=24):
    """One recording per participant, windows every 2 s, blocks of 6 windows alternating low
    and high."""
    rng = np.random.default_rng(1)
    rows = []
    for p in range(n_people):
        for w in range(n_windows):
            level = ("low", "high")[(w // 6 + p) % 2]
            rows.append({"site": ("s1", "s2")[p % 2], "participant": f"{p:02d}", "session": "",
                         "task": "t", "run": "", "window_start_s": 2.0 * w, "rating": None,
                         "level": level, "condition": level,
                         "recording": f"sub-{p:02d}_task-t_eeg.edf", "acquisition": "",
                         "block_onset_s": 12.0 * (w // 6), "qc_verdict": "pass",
                         **dict(zip(FEATURES, rng.normal(size=2).tolist(), strict=True))})
    return pd.DataFrame(rows)


@pytest.mark.parametrize("scheme", [{"scheme": "grouped_kfold", "n_splits": 3},
                                    {"scheme": "within_participant_time"}])
def test_a_test_rows_sequence_holds_only_its_recordings_windows_of_the_same_part(
        monkeypatch, scheme):
    """Through fit_fold with the real pipeline: every sequence the learner builds at predict
    is made of test rows of the row's own recording, earlier or equal in time, ending at the
    row; at fit, of training rows likewise. Under the time-ordered scheme each recording
    has windows on both sides, so a sequence built from the whole table would reach into
    the training part: the first test window of each person is padded with itself
    instead."""
    frame = timed_table()
    spec = TrainingSpec.from_dict(
        {"feature_set": 1, "validation": scheme, "seed": 0,
         "models": [{"learner": "gru", "params": dict(TINY, n_windows=4)}]},
        columns=FEATURES, sites=["s1", "s2"])
    data = run_module.prepare_data(frame, spec, window_s=4.0)
    folds = run_module.folds_for(spec, data)
    calls = []
    original = recurrent.sequence_rows

    def spy(recordings, starts, n_windows):
        out = original(recordings, starts, n_windows)
        calls.append(out)
        return out

    monkeypatch.setattr(recurrent, "sequence_rows", spy)
    padded_against_train = 0
    for fold in folds:
        calls.clear()
        run_module.fit_fold(spec.models[0], data, fold, seed=0)
        fit_seq, predict_seq = calls
        for part, seq in ((fold.train, fit_seq), (fold.test, predict_seq)):
            assert seq.shape == (part.size, 4)
            rows = part[seq]                     # data rows of each sequence
            assert_array_equal(rows[:, -1], part)  # ends at the row itself
            assert (data.recordings[rows] == data.recordings[part][:, None]).all()
            assert (np.diff(data.order[rows], axis=1) >= 0).all()
            assert np.isin(rows, part).all()
        other = np.setdiff1d(np.arange(data.y.size), fold.test)
        for i, row in enumerate(fold.test):
            earlier = other[(data.recordings[other] == data.recordings[row])
                            & (data.order[other] < data.order[row])]
            if earlier.size and data.order[row] == data.order[fold.test][
                    data.recordings[fold.test] == data.recordings[row]].min():
                assert (fold.test[predict_seq[i]] == row).all()  # padded, not borrowed
                padded_against_train += 1
    if scheme["scheme"] == "within_participant_time":
        assert padded_against_train == 6  # each person's first test window
    else:
        assert padded_against_train == 0  # whole recordings on one side


def test_sklearn_interface_clone_params_and_determinism():
    X, y, _ = sequences_table()
    model = RecurrentClassifier(cell="lstm", random_state=3, **TINY)
    copy = clone(model)
    assert copy.get_params() == model.get_params()
    copy.set_params(n_windows=2, hidden=(5,))
    assert copy.n_windows == 2 and model.n_windows == 3
    first = model.fit(X, y).predict_proba(X)
    second = clone(model).fit(X, y).predict_proba(X)
    assert_array_equal(first, second)  # bit for bit, same machine
    assert_allclose(first.sum(axis=1), 1.0, rtol=1e-6)
    assert set(model.predict(X)) <= {"high", "low"} and list(model.classes_) == ["high", "low"]
    other_seed = clone(model).set_params(random_state=4).fit(X, y).predict_proba(X)
    assert not np.array_equal(first, other_seed)
    # the process's own PyTorch random stream is left as it was
    import torch

    torch.manual_seed(11)
    expected = torch.rand(3)
    torch.manual_seed(11)
    clone(model).fit(X, y)
    assert torch.equal(torch.rand(3), expected)


def test_threads_come_from_the_worker_setting(monkeypatch):
    import torch

    seen = []
    original = RecurrentClassifier._net

    def spy(self, *args):
        seen.append(torch.get_num_threads())
        return original(self, *args)

    monkeypatch.setattr(RecurrentClassifier, "_net", spy)
    monkeypatch.setenv("CAIRN_WORKER_THREADS", "1")
    before = torch.get_num_threads()
    X, y, _ = sequences_table()
    RecurrentClassifier(random_state=0, **TINY).fit(X, y).predict(X)
    assert seen == [1, 1] and torch.get_num_threads() == before


def _gru_by_hand(weights, x, hidden):
    """PyTorch's GRU equations (torch.nn.GRU documentation), numpy, one direction."""
    def sigmoid(v):
        return 1 / (1 + np.exp(-v))

    h = np.zeros((x.shape[0], hidden))
    w_ih, w_hh, b_ih, b_hh = weights
    for t in range(x.shape[1]):
        gi, gh = x[:, t] @ w_ih.T + b_ih, h @ w_hh.T + b_hh
        r = sigmoid(gi[:, :hidden] + gh[:, :hidden])
        z = sigmoid(gi[:, hidden:2 * hidden] + gh[:, hidden:2 * hidden])
        n = np.tanh(gi[:, 2 * hidden:] + r * gh[:, 2 * hidden:])
        h = (1 - z) * n + z * h
    return h


def test_stored_weights_are_the_network_pytorchs_gru_equations_give():
    """One GRU layer of 4 units and the dense head, recomputed in numpy from ``weights_``
    with the equations of PyTorch's nn.GRU documentation, give the learner's probabilities:
    the release holds the whole network as plain arrays."""
    X, y, _ = sequences_table()
    model = RecurrentClassifier(hidden=(4,), n_windows=3, epochs=2, random_state=0).fit(X, y)
    w = model.weights_
    assert all(isinstance(v, np.ndarray) for v in w.values())
    seq = X[:, :-2][sequence_rows(X[:, -2], X[:, -1], 3)]
    h = _gru_by_hand([w[f"layers.0.{k}_l0"] for k in ("weight_ih", "weight_hh", "bias_ih",
                                                       "bias_hh")], seq, 4)
    logits = h @ w["head.weight"].T + w["head.bias"]
    expected = np.exp(logits - logits.max(axis=1, keepdims=True))
    expected /= expected.sum(axis=1, keepdims=True)
    assert_allclose(model.predict_proba(X), expected, atol=1e-5)


@pytest.mark.parametrize("cell,bidirectional", KINDS)
def test_each_kind_in_participant_bagging_and_grouped_stacking(cell, bidirectional):
    """The ensembles take the learners unchanged: bagging draws participants (a person drawn
    twice gives each window twice, which the sequences count once), stacking's inner folds
    keep people together and its predict_proba rows sum to one."""
    X, y, groups = sequences_table()
    member = RecurrentClassifier(cell=cell, bidirectional=bidirectional, random_state=0, **TINY)
    bagging = GroupBaggingClassifier(member, n_estimators=2, random_state=0).fit(X, y, groups)
    assert bagging.predict(X).shape == y.shape
    stacking = GroupStackingClassifier(
        [("rnn", member), ("logistic", CurrentWindow(LogisticRegression()))],
        n_inner_splits=2, random_state=0).fit(X, y, groups)
    assert_allclose(stacking.predict_proba(X).sum(axis=1), 1.0)
    assert stacking.inner_cv_ == "StratifiedGroupKFold"


def test_current_window_hides_the_keys_from_a_feature_learner():
    X, y, _ = sequences_table()
    wrapped = CurrentWindow(LogisticRegression()).fit(X, y)
    plain = LogisticRegression().fit(X[:, :-2], y)
    assert wrapped.estimator_.n_features_in_ == 3
    assert_array_equal(wrapped.predict_proba(X), plain.predict_proba(X[:, :-2]))
    assert_array_equal(wrapped.decision_function(X), plain.decision_function(X[:, :-2]))


def test_release_round_trip_through_skops_with_trusted_types():
    """The fitted pipeline with a stacking of recurrent and feature learners saves with
    skops_bytes; the types to trust beyond the stacking's are this module's two classes
    (nothing of PyTorch);
    load_release with that list gives the same predictions, and refuses without it."""
    frame = timed_table()
    spec = TrainingSpec.from_dict(
        {"feature_set": 1, "validation": {"scheme": "grouped_kfold", "n_splits": 3},
         "seed": 0, "models": [{"ensemble": "stacking", "members": ["bigru", "logistic"],
                                "n_inner_splits": 2}]},
        columns=FEATURES, sites=["s1", "s2"])
    data = run_module.prepare_data(frame, spec, window_s=4.0)
    model = spec.models[0]
    assert recurrent.uses_sequences(model)
    X = run_module.model_inputs(model, data, data.X)
    estimator = run_module.build_estimator(model, seed=0)
    estimator.set_params(**{"model__bigru-0__epochs": 2, "model__bigru-0__hidden": (4,)})
    estimator.fit(X, data.y, model__groups=data.participants)
    payload = skops_bytes(estimator)
    trusted = trusted_types(payload)
    assert sorted(trusted) == [  # numpy.dtype: any stacking's own (lda+logistic too)
        "cairn_science.learning.ensembles.GroupStackingClassifier",
        "cairn_science.learning.recurrent.CurrentWindow", RECURRENT, "numpy.dtype"]
    with pytest.raises(ValueError, match="not in the trusted list"):
        load_release(payload, [t for t in trusted if t != RECURRENT])
    loaded = load_release(payload, trusted)
    assert_array_equal(loaded.predict_proba(X), estimator.predict_proba(X))
