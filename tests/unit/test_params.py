"""Declarative parameter limits (cairn_science.params) and the parameter objects that use them:
each constraint kind, messages that name the field and say what to give, one overlap rule
everywhere, and the learner table's limits against scikit-learn's own."""

from dataclasses import dataclass
from typing import ClassVar

import numpy as np
import pytest

from cairn_science.learning.learners import LEARNERS, make_learner, param_problems
from cairn_science.learning.spec import SpecError, TrainingSpec
from cairn_science.learning.validation import Scheme, SchemeError
from cairn_science.params import (
    InstanceOf,
    Integral,
    Interval,
    ListOf,
    Options,
    ParamError,
    Problem,
    Real,
    check,
    validate,
)
from cairn_science.qc.settings import QCSettings
from cairn_science.signal.prepare import PrepSettings
from cairn_science.signal.windows import plan_windows

# Constraint kinds (plumbing; invented values) ------------------------------------------------


@pytest.mark.parametrize("interval, inside, outside, words", [
    (Interval(Real, 0, 0.9, closed="both"), [0, 0.0, 0.5, 0.9], [-0.1, 0.95, 1, float("nan")],
     "a number from 0 to 0.9"),
    (Interval(Real, 0, 1, closed="left"), [0, 0.999], [1, 1.0, -1e-9],
     "a number at least 0 and below 1"),
    (Interval(Real, 0, 1, closed="neither"), [0.5], [0, 1], "a number above 0 and below 1"),
    (Interval(Real, 0, None, closed="neither"), [1e-9, 1e9], [0, -1, float("inf")],
     "a number above 0"),
    (Interval(Integral, 2, None, closed="left"), [2, 50, np.int64(3)], [1, 2.0, "five", True],
     "a whole number of at least 2"),
    (Interval(Real, None, 3, closed="right"), [-5, 3], [3.5], "a number of at most 3"),
])
def test_interval_bounds_types_and_words(interval, inside, outside, words):
    """Closed bounds belong to the interval, open ones do not; booleans, text, NaN and
    infinities are no numbers; a whole-number interval takes no float."""
    assert interval.describe() == words
    assert all(interval.is_satisfied_by(value) for value in inside)
    assert not any(interval.is_satisfied_by(value) for value in outside)


def test_options_instance_list_and_none():
    options = Options(("average", "as_recorded"))
    assert options.is_satisfied_by("average") and not options.is_satisfied_by("Cz")
    assert not Options((0, 1)).is_satisfied_by(False)  # a boolean is no option 0
    assert options.describe() == "one of 'average', 'as_recorded'"
    flag = InstanceOf(bool, "true or false")
    assert flag.is_satisfied_by(False) and not flag.is_satisfied_by(0)
    assert not InstanceOf(int, "a count").is_satisfied_by(True)
    names = ListOf(InstanceOf(str, "name"), min_length=1, what="channel names")
    assert names.is_satisfied_by(["Cz"]) and names.is_satisfied_by(("Cz", "Pz"))
    assert not names.is_satisfied_by([]) and not names.is_satisfied_by("Cz")
    assert not names.is_satisfied_by(["Cz", 3])
    table = {"a": 1}
    live = Options(table)
    table["b"] = 2  # an entry added later is an option at the next check
    assert live.is_satisfied_by("b")


@dataclass(frozen=True)
class _Toy:
    low: float = 1.0
    high: float = 2.0
    mode: str | None = None

    _parameter_constraints: ClassVar[dict] = {
        "low": [Interval(Real, 0, None, closed="left")],
        "high": [Interval(Real, 0, None, closed="left")],
        "mode": [Options(("a", "b")), None],
    }

    @staticmethod
    def _order(values):
        if values["low"] >= values["high"]:
            yield ("low", "give a low value below high")

    _parameter_checks: ClassVar[tuple] = (_order,)


def test_validate_names_every_field_with_what_to_give():
    """Every bad field is reported at once, with its path and what to give; a dict is
    checked with the class's defaults for the fields left out; unknown keys are named."""
    problems = validate({"low": -1, "mode": "c", "hgih": 3}, _Toy, prefix="toy")
    assert problems == [
        Problem("toy.hgih", "unknown setting; known: low, high, mode"),
        Problem("toy.low", "give a number of at least 0; got -1"),
        Problem("toy.mode", "give one of 'a', 'b' or null; got 'c'"),
    ]
    # cross-field rules run once every field is valid, with the defaults filled in
    assert validate({"low": 3}, _Toy) == [Problem("low", "give a low value below high")]
    assert validate(_Toy(low=0.5)) == []
    with pytest.raises(ParamError) as caught:
        check(_Toy(low=5))
    assert caught.value.errors == {"low": ["give a low value below high"]}
    assert str(caught.value) == "low: give a low value below high"


# One overlap rule: 0 <= overlap <= 0.9 (the study protocol's) -----------------------------

OVERLAP_WORDS = "overlap: give a number from 0 to 0.9; got 0.95"


def test_overlap_above_the_limit_is_refused_with_the_same_words_everywhere_in_the_science():
    """0.95 is refused by the preparation settings and the window planner with the same
    message; 0.9 (the limit, a step of a tenth of a window) is accepted by both.
    Closed form: round(200 * (1 - 0.9)) = 20 samples per step."""
    with pytest.raises(ValueError) as from_settings:
        PrepSettings.from_dict({"overlap": 0.95})
    with pytest.raises(ValueError) as from_planner:
        plan_windows(1000, sfreq_hz=100.0, window_s=2.0, overlap=0.95)
    assert str(from_settings.value) == str(from_planner.value) == OVERLAP_WORDS
    assert PrepSettings.from_dict({"overlap": 0.9}).overlap == 0.9
    assert plan_windows(1000, sfreq_hz=100.0, window_s=2.0, overlap=0.9).step_samples == 20


def test_window_planner_defaults_are_the_settings_defaults():
    """plan_windows without a window length or overlap uses PrepSettings' (one place)."""
    plan = plan_windows(10_000, sfreq_hz=100.0)
    settings = PrepSettings()
    assert plan.window_samples == round(settings.window_s * 100)
    assert plan.step_samples == round(plan.window_samples * (1 - settings.overlap))


def test_settings_round_trip_and_normalise_numbers():
    """as_dict gives plain JSON values; numpy and int inputs become floats, so equal
    settings give equal dicts (their digests are part of stored rows)."""
    settings = PrepSettings(l_freq_hz=np.float64(1), window_s=2, notch=np.bool_(True),
                            channels=["Fz", "Cz"])
    data = settings.as_dict()
    assert data == {"l_freq_hz": 1.0, "h_freq_hz": 40.0, "notch": True,
                    "analysis_sfreq_hz": None, "channels": ["Fz", "Cz"],
                    "bad_channels": "interpolate", "reference": "average", "window_s": 2.0,
                    "overlap": 0.5}
    assert type(data["l_freq_hz"]) is float and type(data["notch"]) is bool
    assert PrepSettings.from_dict(data) == settings


def test_qc_settings_limits_and_order():
    problems = validate({"bad_channel_share_fail": 1.5, "n_neighbours": 0}, QCSettings,
                        prefix="qc")
    assert [p.field for p in problems] == ["qc.bad_channel_share_fail", "qc.n_neighbours"]
    assert problems[0].message == "give a number from 0 to 1; got 1.5"
    assert validate({"bad_channel_share_review": 0.3}, QCSettings) == [Problem(
        "bad_channel_share_review",
        "give a review threshold not above bad_channel_share_fail (0.25); got 0.3")]


# The validation scheme and the training spec ----------------------------------------------


def test_n_splits_five_is_refused_naming_the_field():
    """The spec check refuses "n_splits": "five" (it used to pass and fail in the worker),
    and the scheme object refuses it with the same words."""
    with pytest.raises(SpecError) as caught:
        TrainingSpec.from_dict({"feature_set": 1, "models": [{"learner": "lda"}],
                                "validation": {"scheme": "grouped_kfold", "n_splits": "five"}})
    assert caught.value.errors == {
        "validation.n_splits": ["give a whole number of at least 2; got 'five'"]}
    with pytest.raises(SchemeError, match="n_splits: give a whole number of at least 2; "
                                          "got 'five'"):
        Scheme("grouped_kfold", n_splits="five")


@pytest.mark.parametrize("section, typo, known", [
    ("statistics", "permutation", "bootstrap, paired_repeats, paired_splits, paired_test, "
                                  "permutations"),
    ("label", "knd", "classes, kind, map"),
    ("include", "site", "min_windows_per_recording, qc_verdicts, sites"),
    ("features", "band", "bands, channels, exclude, include"),
    ("normalisation", "participants", "participant, site_standardise"),
    ("release", "per-site", "model, per_site, pooled"),
])
def test_a_misspelt_field_in_a_spec_section_is_refused(section, typo, known):
    """A misspelt setting ("permutation": 200) used to be ignored, leaving the default (no
    permutations) while the person believed otherwise: every section names it now."""
    with pytest.raises(SpecError) as caught:
        TrainingSpec.from_dict({"feature_set": 1, "models": [{"learner": "lda"}],
                                section: {typo: 1}})
    assert caught.value.errors[f"{section}.{typo}"] == [f"unknown field; known: {known}"]


def test_spec_defaults_come_from_the_parameter_objects():
    spec = TrainingSpec.from_dict({"feature_set": 1, "models": [
        {"learner": "lda"}, {"ensemble": "bagging", "learner": "knn"}]})
    assert spec.validation == Scheme().as_dict()
    bagging = spec.models[1]
    assert (bagging.n_members, bagging.sample_by, bagging.voting) == (10, "participant", "soft")


def test_spec_names_model_fields_and_learner_parameters():
    with pytest.raises(SpecError) as caught:
        TrainingSpec.from_dict({"feature_set": 1, "models": [
            {"learner": "logistic", "params": {"C": 0}},
            {"ensemble": "bagging", "learner": "lda", "n_members": 1, "votng": "soft"},
            {"ensemble": "stacking", "members": ["lda"]},
            {"learner": "mlp", "params": {"early_stopping": True}},
        ], "comparison": {"learners": ["lda"], "members": [5, "ten"]},
            "statistics": {"paired_splits": 1}})
    errors = caught.value.errors
    assert errors["models[0].params.C"] == ["give a number above 0; got 0"]
    assert errors["models[1].n_members"] == ["give a whole number of at least 2; got 1"]
    assert errors["models[1].votng"][0].startswith("unknown setting")
    assert errors["models[2].members"][0].startswith("give a list of at least 2 learner names")
    assert "leave it out" in errors["models[3].params.early_stopping"][0]
    assert "comparison.members" in errors and "statistics.paired_splits" in errors


_PROBES = [-1, 0, 0.5, 1, 1.5, 2, 15, "auto", "scale", "sqrt", "log2", "balanced", "lsqr",
           "svd", "rbf", "linear", "uniform", "distance", "x", None, True, [3], (32,), [0]]


def _sklearn_accepts(learner, key, value):
    from sklearn.utils._param_validation import InvalidParameterError

    estimator = learner.factory(0, **{**learner.defaults, key: value})
    try:
        estimator._validate_params()
    except InvalidParameterError:
        return False
    return True


@pytest.mark.parametrize("name", [name for name, learner in LEARNERS.items()
                                  if learner.constraints and hasattr(
                                      learner.factory(0), "_parameter_constraints")])
def test_learner_limits_are_never_looser_than_scikit_learns(name):
    """Every probe value our table accepts for a parameter, scikit-learn's own parameter
    validation (each estimator's _parameter_constraints) accepts too. Reference:
    scikit-learn's parameter validation, run on the installed version."""
    learner = LEARNERS[name]
    checked = 0
    for key, allowed in learner.constraints.items():
        for value in _PROBES:
            if not validate({key: value}, {key: allowed}):
                assert _sklearn_accepts(learner, key, value), (name, key, value)
                checked += 1
    assert checked >= len(learner.constraints)


def test_make_learner_applies_the_table_limits():
    with pytest.raises(ParamError, match="params.n_neighbors: give a whole number of at "
                                         "least 1; got 0"):
        make_learner("knn", {"n_neighbors": 0})
    assert param_problems("knn", {"n_neighbors": 5}) == []
    # a parameter the table does not constrain is checked by scikit-learn's own limits
    problems = param_problems("logistic", {"tol": -1.0})
    assert [p.field for p in problems] == ["params.tol"]


def test_an_unchanged_spec_keeps_its_stored_digest():
    """A run stores its spec's plain form and its digest; the digest below was computed by
    the spec check before the limits moved to the parameter objects (commit 7ee2433's
    parent), so an unchanged spec must still give it."""
    from cairn_science.canonical_json import canonical_sha256

    spec = {"feature_set": 4, "label": {"kind": "level"},
            "validation": {"scheme": "grouped_kfold", "n_splits": 3},
            "models": [{"learner": "lda"}, {"learner": "logistic", "params": {"C": 0.5}},
                       {"ensemble": "bagging", "learner": "lda", "n_members": 3},
                       {"ensemble": "stacking", "members": ["lda", "logistic"],
                        "n_inner_splits": 2}],
            "comparison": {"strategies": ["bagging"], "learners": ["knn"], "members": [5]},
            "statistics": {"paired_test": True, "paired_splits": 3, "paired_repeats": 2,
                           "permutations": 4, "bootstrap": 200}, "seed": 3}
    stored = TrainingSpec.from_dict(spec).as_dict()
    assert canonical_sha256(stored) == (
        "c7a67eb5aec18e2f73aa50f0bfa0facafa5582a10618283af41866e8dee01b5a")
    assert TrainingSpec.from_dict(stored).as_dict() == stored  # the worker's rebuild
