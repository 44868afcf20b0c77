"""Evaluating a spec on a table: nothing of an outer test participant enters any fit, the
participant normalisation uses only the person's own rows, and specs say what is wrong.

Sources: the leakage rule itself (every fitted step inside the outer training part, inner
splits grouped by participant) is common practice, no source; the spies below prove it for
our code by recording every row each fitted step sees.
"""

import numpy as np
import pandas as pd
import pytest
from sklearn.base import BaseEstimator, ClassifierMixin, TransformerMixin
from sklearn.pipeline import Pipeline

from cairn_science.learning import run as run_module
from cairn_science.learning.ensembles import GroupStackingClassifier
from cairn_science.learning.spec import SpecError, TrainingSpec, expand_comparison

SEEN = []


class SpyStep(TransformerMixin, BaseEstimator):
    """A pass-through step that records the row ids (column 0) it is fitted on."""

    def __init__(self, tag="step"):
        self.tag = tag

    def fit(self, X, y=None):
        SEEN.append((self.tag, set(np.asarray(X)[:, 0].astype(int).tolist()), len(X)))
        return self

    def transform(self, X):
        return np.asarray(X)


class SpyClassifier(ClassifierMixin, BaseEstimator):
    def __init__(self, tag="member"):
        self.tag = tag

    def fit(self, X, y):
        SEEN.append((self.tag, set(np.asarray(X)[:, 0].astype(int).tolist()), len(X)))
        self.classes_ = np.unique(y)
        return self

    def predict_proba(self, X):
        return np.full((len(X), len(self.classes_)), 1.0 / len(self.classes_))

    def predict(self, X):
        return np.repeat(self.classes_[0], len(X))


def table(n_people=8, per=6, sites=("s1", "s2")):
    rows = []
    rng = np.random.default_rng(0)
    for p in range(n_people):
        site = sites[p % len(sites)]
        for w in range(per):
            level = ("low", "high")[w % 2]
            rows.append({"site": site, "participant": f"{p:02d}", "session": "", "task": "t",
                         "run": "", "window_start_s": float(w), "rating": 2 if level == "low"
                         else 8, "level": level, "condition": level,
                         "recording": f"sub-{p:02d}_run-{w % 2}.edf", "acquisition": "",
                         "block_onset_s": 0.0, "qc_verdict": "pass",
                         "alpha.relative_power.Pz": rng.normal(), "theta.relative_power.Fz":
                         rng.normal()})
    return pd.DataFrame(rows)


def spec(**changes):
    data = {"feature_set": 1, "validation": {"scheme": "grouped_kfold", "n_splits": 4},
            "models": [{"learner": "lda"}], "seed": 0}
    data.update(changes)
    return TrainingSpec.from_dict(data, columns=["alpha.relative_power.Pz",
                                                 "theta.relative_power.Fz"], sites=["s1", "s2"])


def test_no_row_of_an_outer_test_participant_enters_any_fit(monkeypatch):
    """Spies at every fitted step (imputer, scaler, stacking members on inner folds, meta
    learner) record the rows they see; none belongs to the fold's test participants."""
    frame = table()
    data = run_module.prepare_data(frame, spec())
    data.X = np.column_stack([np.arange(len(data.y)), data.X])  # column 0: the row id

    def spy_estimator(model, *, seed):
        return Pipeline([
            ("impute", SpyStep("impute")), ("scale", SpyStep("scale")),
            ("model", GroupStackingClassifier([("a", SpyClassifier("a")),
                                               ("b", SpyClassifier("b"))],
                                              final_estimator=SpyClassifier("meta"),
                                              n_inner_splits=3, random_state=seed))])

    monkeypatch.setattr(run_module, "build_estimator", spy_estimator)
    stacking = spec(models=[{"ensemble": "stacking", "members": ["lda", "knn"]}])
    folds = run_module.folds_for(stacking, data)
    assert len(folds) == 4
    for fold in folds:
        SEEN.clear()
        run_module.fit_fold(stacking.models[0], data, fold, seed=0)
        test_people = set(data.participants[fold.test].tolist())
        test_rows = set(fold.test.tolist())
        assert SEEN, "no fit was recorded"
        assert {tag for tag, _, _ in SEEN} == {"impute", "scale", "a", "b", "meta"}
        for tag, rows, n in SEEN:
            if tag == "meta":  # fitted on the members' out-of-fold outputs, one per train row
                assert n == fold.train.size
                continue
            assert not rows & test_rows, f"{tag} saw test rows"
            assert not set(data.participants[list(rows)].tolist()) & test_people, tag
        inner = [rows for tag, rows, n in SEEN if tag == "a"]
        assert len(inner) == 3 + 1 and inner[-1] == set(fold.train.tolist())  # 3 inner + refit


def test_site_standardisation_uses_training_rows_only():
    """Changing the test rows' values leaves every standardised training row unchanged."""
    frame = table()
    data = run_module.prepare_data(frame, spec())
    fold = run_module.folds_for(spec(), data)[0]
    before = run_module.site_standardise(data.X, data.sites, fold.train)
    changed = data.X.copy()
    changed[fold.test] += 1000.0
    after = run_module.site_standardise(changed, data.sites, fold.train)
    np.testing.assert_array_equal(before[fold.train], after[fold.train])


def test_participant_normalisation_uses_only_the_persons_own_rows():
    """Mean referencing: a participant's values depend on their rows alone (changing another
    participant's rows changes nothing), and each participant's mean becomes 0."""
    frame = table()
    base = run_module.prepare_data(frame, spec(normalisation={"participant": "mean"}))
    other = frame.copy()
    other.loc[other["participant"] == "03", "alpha.relative_power.Pz"] += 50.0
    moved = run_module.prepare_data(other, spec(normalisation={"participant": "mean"}))
    keep = base.participants != "s2/03"
    np.testing.assert_allclose(base.X[keep], moved.X[keep])
    for person in set(base.participants.tolist()):
        np.testing.assert_allclose(base.X[base.participants == person].mean(axis=0), 0,
                                   atol=1e-12)


FEATURES = ["alpha.relative_power.Pz", "theta.relative_power.Fz"]


def timed_table(n_people=8, n_windows=30, step_s=2.0):
    """One recording per participant: 4 resting windows (no level), then task blocks of 6
    windows alternating low and high, at a 2 s step (4 s windows overlap by half). Each
    person's features carry a person offset and a slow drift, so statistics of different
    parts of the recording differ."""
    rng = np.random.default_rng(1)
    rows = []
    for p in range(n_people):
        offset = rng.normal(0, 3, 2)
        for w in range(n_windows):
            rest = w < 4
            level = None if rest else ("low", "high")[((w - 4) // 6 + p) % 2]
            values = offset + 0.05 * w + rng.normal(0, 1, 2)
            rows.append({"site": "s1", "participant": f"{p:02d}", "session": "", "task": "t",
                         "run": "", "window_start_s": w * step_s, "rating": None,
                         "level": level, "condition": "rest" if rest else level,
                         "recording": f"sub-{p:02d}_task-t_eeg.edf", "acquisition": "",
                         "block_onset_s": 0.0 if rest else 8.0 + 12.0 * ((w - 4) // 6),
                         "qc_verdict": "pass", FEATURES[0]: values[0], FEATURES[1]: values[1]})
    return pd.DataFrame(rows)


def _fitted_inputs(monkeypatch, data, fold, model):
    """(X the model is fitted on, X it predicts) in one fold, through fit_fold."""
    seen = {}

    class Recorder(ClassifierMixin, BaseEstimator):
        def fit(self, X, y):
            seen["fit"] = np.array(X, copy=True)
            self.classes_ = np.unique(y)
            return self

        def predict(self, X):
            seen["predict"] = np.array(X, copy=True)
            return np.repeat(self.classes_[0], len(X))

    monkeypatch.setattr(run_module, "build_estimator", lambda model, *, seed: Recorder())
    run_module.fit_fold(model, data, fold, seed=0)
    return seen["fit"], seen["predict"]


def _flip_test_rows(frame, table_rows):
    """The table with the given rows' feature values moved by 1000 and their labels swapped."""
    changed = frame.copy()
    changed.loc[table_rows, FEATURES] += 1000.0
    swapped = changed.loc[table_rows, "level"].map({"low": "high", "high": "low"})
    changed.loc[table_rows, "level"] = swapped
    changed.loc[table_rows, "condition"] = swapped
    return changed


def _expected(frame, table_rows, reference):
    """Rows normalised by hand: (value - mean) / SD (ddof 0) of the reference rows."""
    ref = frame.loc[reference, FEATURES].to_numpy(dtype=float)
    return (frame.loc[table_rows, FEATURES].to_numpy(dtype=float) - ref.mean(axis=0)) / \
        ref.std(axis=0)


@pytest.mark.parametrize("mode", ["mean", "baseline"])
def test_time_ordered_normalisation_sees_only_each_persons_earlier_part(monkeypatch, mode):
    """Common practice, no source: statistics used to transform training data must not come
    from test data (Varoquaux et al. 2017, NeuroImage 145:166, from memory: every step
    fitted on data sits inside the cross-validation loop). Under the time-ordered scheme a
    person's normalisation statistics come from their earlier (training) part only -- all
    their windows up to their last training window ('mean', the resting windows included:
    no label is used) or their resting windows ('baseline') -- and their later (test) part
    is normalised with those same statistics. Spy: the rows the model is fitted on do not
    change when the test rows' values and labels change, and every value it sees equals the
    rule computed by hand from the table."""
    frame = timed_table()
    within = spec(validation={"scheme": "within_participant_time", "test_share": 0.25},
                  normalisation={"participant": mode})
    data = run_module.prepare_data(frame, within, window_s=4.0)
    (fold,) = run_module.folds_for(within, data)
    fit_x, predict_x = _fitted_inputs(monkeypatch, data, fold, within.models[0])

    moved = run_module.prepare_data(_flip_test_rows(frame, data.rows[fold.test]), within,
                                    window_s=4.0)
    (moved_fold,) = run_module.folds_for(within, moved)
    np.testing.assert_array_equal(moved_fold.train, fold.train)
    np.testing.assert_array_equal(moved_fold.test, fold.test)
    moved_fit, _ = _fitted_inputs(monkeypatch, moved, moved_fold, within.models[0])
    np.testing.assert_array_equal(moved_fit, fit_x)

    for person in np.unique(data.participants):
        own = data.participants == person
        train_rows, test_rows = data.rows[fold.train[own[fold.train]]], \
            data.rows[fold.test[own[fold.test]]]
        mine = frame.index[(frame["participant"] == person.split("/")[1])]
        last_start = frame.loc[train_rows, "window_start_s"].max()
        earlier = mine[frame.loc[mine, "window_start_s"] <= last_start]
        if mode == "baseline":
            earlier = earlier[frame.loc[earlier, "condition"] == "rest"]
        assert frame.loc[test_rows, "window_start_s"].min() > last_start + 4.0
        np.testing.assert_allclose(fit_x[own[fold.train]],
                                   _expected(frame, train_rows, earlier), rtol=1e-12)
        np.testing.assert_allclose(predict_x[own[fold.test]],
                                   _expected(frame, test_rows, earlier), rtol=1e-12)


@pytest.mark.parametrize("mode", ["mean", "baseline"])
def test_grouped_normalisation_rule(monkeypatch, mode):
    """Common practice, no source (as above). Under participant-grouped folds a training
    person is normalised by their own windows (all of them for 'mean', resting ones for
    'baseline'); a held-out person by their own resting windows ('baseline') or by their
    own windows being classified ('mean': feature values only, never a label -- the rule
    stated on the run page and in the README). Spy: in every fold the rows the model is
    fitted on do not change when the test rows' values and labels change."""
    frame = timed_table()
    grouped = spec(normalisation={"participant": mode})
    data = run_module.prepare_data(frame, grouped)
    for fold in run_module.folds_for(grouped, data):
        fit_x, predict_x = _fitted_inputs(monkeypatch, data, fold, grouped.models[0])
        moved = run_module.prepare_data(_flip_test_rows(frame, data.rows[fold.test]), grouped)
        np.testing.assert_array_equal(moved.rows, data.rows)  # same rows: the same fold
        moved_fit, _ = _fitted_inputs(monkeypatch, moved, fold, grouped.models[0])
        np.testing.assert_array_equal(moved_fit, fit_x)
        for part, seen in ((fold.train, fit_x), (fold.test, predict_x)):
            for person in np.unique(data.participants[part]):
                own = data.participants[part] == person
                mine = frame.index[frame["participant"] == person.split("/")[1]]
                if mode == "baseline":
                    mine = mine[frame.loc[mine, "condition"] == "rest"]
                np.testing.assert_allclose(seen[own], _expected(frame, data.rows[part][own],
                                                                mine), rtol=1e-12)
    assert "never their labels" in run_module.normalisation_rule("mean", "grouped_kfold")
    assert "resting windows only" in run_module.normalisation_rule("baseline",
                                                                   "leave_one_participant_out")
    assert "never with its own" in run_module.normalisation_rule(mode, "within_participant_time")


def test_a_baseline_after_the_test_part_is_refused_in_words():
    """Under the time-ordered scheme a person whose resting windows all lie after their
    training part cannot be normalised by 'baseline'; the error names them."""
    frame = timed_table()
    late = frame["participant"] == "03"
    frame.loc[late & (frame["condition"] == "rest"), "window_start_s"] += 1000.0
    within = spec(validation={"scheme": "within_participant_time"},
                  normalisation={"participant": "baseline"})
    data = run_module.prepare_data(frame, within, window_s=4.0)
    with pytest.raises(run_module.DataError, match="s1/03 has no resting-baseline windows "
                                                   "before their test part"):
        run_module.folds_for(within, data)


def test_specs_name_what_is_wrong():
    with pytest.raises(SpecError) as caught:
        TrainingSpec.from_dict({"feature_set": "x", "label": {"kind": "mood"},
                                "validation": {"scheme": "guess"},
                                "models": [{"learner": "oracle"}],
                                "features": {"include": ["gamma.*"]}},
                               columns=["alpha.relative_power.Pz"])
    errors = caught.value.errors
    assert {"feature_set", "label.kind", "validation.scheme", "models[0].learner",
            "features"} <= set(
        errors)
    assert any("gamma.*" in m for m in errors["features"])


@pytest.mark.parametrize("field, value", [("label", "level"), ("validation", ["grouped"]),
                                          ("statistics", 5), ("models", {"learner": "lda"})])
def test_a_section_of_the_wrong_shape_is_named_not_a_crash(field, value):
    """A script that sends ``"label": "level"`` gets the field named, not an internal error."""
    with pytest.raises(SpecError) as caught:
        TrainingSpec.from_dict({"feature_set": 1, "models": [{"learner": "lda"}],
                                field: value})
    assert field in caught.value.errors


def test_comparison_grid_expands_with_baselines():
    models = expand_comparison({"strategies": ["bagging", "stacking"],
                                "learners": ["lda", "knn"], "mixed": [["lda", "knn", "logistic"]],
                                "members": [5, 10]})
    names = [m.name for m in models]
    assert "bagging-lda-5" in names and "stacking-knn-10" in names
    assert "stacking-lda+knn+logistic-10" in names
    assert {"lda", "knn", "logistic"} <= set(names)  # each member learner alone
    assert len(names) == len(set(names)) == 2 * 2 * 2 + 2 + 3


def test_a_class_with_too_few_participants_is_refused():
    frame = table(n_people=3)
    data = run_module.prepare_data(frame, spec())
    from cairn_science.learning.validation import SchemeError

    with pytest.raises((run_module.DataError, SchemeError), match="participant"):
        run_module.folds_for(spec(), data)
