"""A training request as plain data: which rows, which label, which features, which validation,
which models, which statistics. ``TrainingSpec.from_dict`` checks it against the feature table
it will run on and raises :class:`SpecError` naming every field that is wrong and what to do.
"""

from __future__ import annotations

import fnmatch
from dataclasses import dataclass, field
from typing import ClassVar

from cairn_science.params import (
    InstanceOf,
    Integral,
    Interval,
    ListOf,
    Options,
    Problem,
    defaults_of,
    raise_for,
    validate,
)

from .learners import LEARNERS, param_problems
from .validation import Scheme

#: What a run predicts, with the words a page shows for it.
LABEL_KIND_WORDS = {"level": "workload level (from the ratings)",
                    "condition": "condition (e.g. rest against task)"}
LABEL_KINDS = tuple(LABEL_KIND_WORDS)
#: Participant normalisations, with the words a page shows for each.
NORMALISATION_WORDS = {"none": "none", "baseline": "by each person's resting windows",
                       "mean": "by each person's own windows"}
NORMALISATIONS = tuple(NORMALISATION_WORDS)
ENSEMBLES = ("bagging", "stacking")
SAMPLE_BY = ("participant", "window")
VOTING = ("soft", "hard")
DEFAULT_QC = ("pass", "review")


class SpecError(ValueError):
    """Problems with a spec; ``errors`` maps a field to its messages."""

    def __init__(self, errors):
        self.errors = errors
        super().__init__("; ".join(f"{k}: {m}" for k, ms in errors.items() for m in ms))


_LEARNER = Options(LEARNERS)  # the table's names at the time of the check
_MEMBER_COUNT = Interval(Integral, 2, None, closed="left")


@dataclass(frozen=True)
class ModelSpec:
    """One model of a run: a learner alone, a bagging of one learner, or a stacking. Its
    defaults and ``_parameter_constraints`` are the only ones (a learner's own parameters
    are checked against its entry in ``LEARNERS``)."""

    name: str
    learner: str | None = None
    params: dict = field(default_factory=dict)
    ensemble: str | None = None
    n_members: int = 10
    sample_by: str = "participant"
    voting: str = "soft"
    members: tuple = ()
    meta: str = "logistic"
    n_inner_splits: int = 5

    _parameter_constraints: ClassVar[dict] = {
        "name": [InstanceOf(str, "a name"), None],
        "learner": [_LEARNER],
        "params": [InstanceOf(dict, "an object of the learner's parameters"), None],
        "ensemble": [Options(ENSEMBLES), None],
        "n_members": [_MEMBER_COUNT],
        "sample_by": [Options(SAMPLE_BY)],
        "voting": [Options(VOTING)],
        "members": [ListOf(_LEARNER, min_length=2, what="learner names")],
        "meta": [_LEARNER],
        "n_inner_splits": [Interval(Integral, 2, None, closed="left")],
    }
    #: The fields each kind of model takes (the others are refused as unknown).
    _FIELDS: ClassVar[dict] = {
        None: ("name", "learner", "params", "ensemble"),
        "bagging": ("name", "learner", "params", "ensemble", "n_members", "sample_by",
                    "voting"),
        "stacking": ("name", "ensemble", "members", "meta", "n_inner_splits"),
    }

    def as_dict(self) -> dict:
        out = {"name": self.name}
        if self.ensemble is None:
            out.update(learner=self.learner, params=dict(self.params))
        elif self.ensemble == "bagging":
            out.update(ensemble="bagging", learner=self.learner, params=dict(self.params),
                       n_members=self.n_members, sample_by=self.sample_by, voting=self.voting)
        else:
            out.update(ensemble="stacking", members=list(self.members), meta=self.meta,
                       n_inner_splits=self.n_inner_splits)
        return out

    @property
    def base_learners(self) -> tuple[str, ...]:
        """The single learners this model is made of (for paired comparisons)."""
        if self.ensemble == "stacking":
            return tuple(dict.fromkeys(self.members))
        return (self.learner,)


@dataclass(frozen=True)
class TrainingSpec:
    feature_set: int
    label: dict
    include: dict
    features: dict
    normalisation: dict
    validation: dict
    models: tuple
    statistics: dict
    seed: int
    release: dict

    def as_dict(self) -> dict:
        return {"feature_set": self.feature_set, "label": self.label, "include": self.include,
                "features": self.features, "normalisation": self.normalisation,
                "validation": self.validation, "models": [m.as_dict() for m in self.models],
                "statistics": self.statistics, "seed": self.seed, "release": self.release}

    @classmethod
    def from_dict(cls, data: dict, *, columns: list[str] | None = None,
                  sites: list[str] | None = None) -> TrainingSpec:
        """Check ``data``; ``columns`` (feature column names of the table) and ``sites`` let
        the check name unknown channels, bands, features and sites."""
        errors = {}

        def add(key, message):
            errors.setdefault(key, []).append(message)

        if not isinstance(data, dict):
            raise SpecError({"spec": ["send the spec as a JSON object"]})
        data = dict(data)

        def section(key, fields=None):
            """The object under ``key``; a field not in ``fields`` is named, so a misspelt
            setting is refused instead of silently left at its default (validation's own
            check names its unknown fields)."""
            value = data.get(key)
            if value is None:
                return {}
            if not isinstance(value, dict):
                add(key, f"give an object ({{…}}), not {type(value).__name__} {value!r}")
                return {}
            for name in sorted(set(value) - set(fields if fields is not None else value)):
                add(f"{key}.{name}", f"unknown field; known: {', '.join(sorted(fields))}")
            return value

        known = {"feature_set", "label", "include", "features", "normalisation", "validation",
                 "models", "comparison", "statistics", "seed", "release"}
        for key in sorted(set(data) - known):
            add(key, f"unknown field; known: {', '.join(sorted(known))}")
        feature_set = data.get("feature_set")
        if not isinstance(feature_set, int):
            add("feature_set", "give the id of a feature set (a whole number)")

        label_defaults = {"kind": "level", "classes": None, "map": None}
        label = {**label_defaults, **section("label", label_defaults)}
        if label["kind"] not in LABEL_KINDS:
            add("label.kind", f"choose one of {', '.join(LABEL_KINDS)}")
        if label["map"] is not None and not isinstance(label["map"], dict):
            add("label.map", 'give an object from value to class, e.g. {"low": "task"}')

        include_defaults = {"sites": None, "qc_verdicts": list(DEFAULT_QC),
                            "min_windows_per_recording": 1}
        include = {**include_defaults, **section("include", include_defaults)}
        if include["sites"] is not None and sites is not None:
            unknown = sorted(set(include["sites"]) - set(sites))
            if unknown:
                add("include.sites", f"{', '.join(unknown)} not in the feature set "
                                     f"({', '.join(sorted(sites))})")
        bad_verdicts = sorted(set(include["qc_verdicts"]) - {"pass", "review", "fail"})
        if bad_verdicts:
            add("include.qc_verdicts", f"{', '.join(bad_verdicts)}: use pass, review, fail")
        if not isinstance(include["min_windows_per_recording"], int) or \
                include["min_windows_per_recording"] < 1:
            add("include.min_windows_per_recording", "give a whole number ≥ 1")

        features_defaults = {"include": ["*"], "exclude": [], "bands": None, "channels": None}
        features = {**features_defaults, **section("features", features_defaults)}
        if columns is not None:
            chosen = select_columns(columns, features)
            if not chosen:
                add("features", "the selection matches no feature column of the set")
            for pattern in features["include"] + features["exclude"]:
                if not any(fnmatch.fnmatchcase(c, pattern) for c in columns):
                    add("features", f"pattern {pattern!r} matches no column (e.g. "
                                    f"'alpha.relative_power.*', '*.Pz')")
            parts = [c.split(".") for c in columns]
            for key, position in (("bands", 0), ("channels", -1)):
                wanted = features[key]
                if wanted:
                    present = {p[position] for p in parts if len(p) >= 2}
                    missing = sorted(set(wanted) - present)
                    if missing:
                        add(f"features.{key}", f"{', '.join(missing)} not in the feature set")

        normalisation_defaults = {"participant": "none", "site_standardise": False}
        normalisation = {**normalisation_defaults,
                         **section("normalisation", normalisation_defaults)}
        if normalisation["participant"] not in NORMALISATIONS:
            add("normalisation.participant", f"choose one of {', '.join(NORMALISATIONS)}")
        if normalisation["participant"] == "baseline" and label["kind"] == "condition":
            add("normalisation.participant",
                "the resting baseline is one of the classes of a condition label; use 'mean' "
                "or 'none'")

        given = section("validation")
        scheme_problems = Scheme.problems_of(given)
        for problem in scheme_problems:
            add(problem.field, problem.message)
        validation = (Scheme().as_dict() if scheme_problems
                      else Scheme.from_dict(given).as_dict())

        models = []
        listed = data.get("models") or []
        if not isinstance(listed, list):
            add("models", "give a list of models")
            listed = []
        for i, item in enumerate(listed):
            problems = model_problems(item, prefix=f"models[{i}]")
            for problem in problems:
                add(problem.field, problem.message)
            if not problems:
                models.append(model_from_dict(item))
        if data.get("comparison"):
            problems = comparison_problems(data["comparison"])
            for problem in problems:
                add(problem.field, problem.message)
            if not problems:
                models.extend(expand_comparison(data["comparison"]))
        names = [m.name for m in models]
        if not models:
            add("models", "list at least one model, or give a comparison grid")
        for name in sorted({n for n in names if names.count(n) > 1}):
            add("models", f"two models are named {name!r}; names must be unique")

        statistics = {**STATISTICS_DEFAULTS, **section("statistics", STATISTICS_DEFAULTS)}
        for problem in validate(statistics, STATISTICS_CONSTRAINTS, prefix="statistics",
                                refuse_unknown=False):
            add(problem.field, problem.message)
        seed = data.get("seed", 0)
        if not isinstance(seed, int):
            add("seed", "give a whole number")
        release_defaults = {"pooled": True, "per_site": False, "model": None}
        release = {**release_defaults, **section("release", release_defaults)}
        if release["model"] is not None and release["model"] not in names:
            add("release.model", f"{release['model']!r} is not one of the models")
        if errors:
            raise SpecError(errors)
        return cls(feature_set=feature_set, label=label, include=include, features=features,
                   normalisation=normalisation, validation=validation, models=tuple(models),
                   statistics=statistics, seed=seed, release=release)


def _join(prefix, name):
    return f"{prefix}.{name}" if prefix else name


def model_problems(item, *, prefix: str = "") -> list[Problem]:
    """Every problem of one model of a spec (an object), with paths under ``prefix``
    (e.g. ``models[0].learner``, ``models[0].params.C``)."""
    if not isinstance(item, dict):
        return [Problem(prefix or "model", 'give an object, e.g. {"learner": "lda"}')]
    ensemble = item.get("ensemble")
    if ensemble not in ModelSpec._FIELDS:
        return [Problem(_join(prefix, "ensemble"),
                        f"give one of {', '.join(map(repr, ENSEMBLES))} or leave it out; "
                        f"got {ensemble!r}")]
    names = ModelSpec._FIELDS[ensemble]
    constraints = {key: ModelSpec._parameter_constraints[key] for key in names}
    problems = validate(item, constraints, prefix=prefix)
    if ensemble != "stacking" and not problems:
        problems = param_problems(item["learner"], item.get("params") or {},
                                  prefix=_join(prefix, "params"))
    return problems


def model_from_dict(item: dict) -> ModelSpec:
    """A ModelSpec from a spec's model object; missing fields take ModelSpec's defaults.
    Raises :class:`~cairn_science.params.ParamError` (a ValueError) naming each problem."""
    raise_for(model_problems(item))
    defaults = defaults_of(ModelSpec)
    ensemble = item.get("ensemble")
    name = item.get("name")
    if ensemble is None:
        return ModelSpec(name=name or item["learner"], learner=item["learner"],
                         params=item.get("params") or {})
    if ensemble == "bagging":
        n = item.get("n_members", defaults["n_members"])
        return ModelSpec(name=name or f"bagging-{item['learner']}-{n}",
                         learner=item["learner"], params=item.get("params") or {},
                         ensemble="bagging", n_members=n,
                         sample_by=item.get("sample_by", defaults["sample_by"]),
                         voting=item.get("voting", defaults["voting"]))
    members = tuple(item["members"])
    return ModelSpec(name=name or f"stacking-{'+'.join(members)}", ensemble="stacking",
                     members=members, meta=item.get("meta", defaults["meta"]),
                     n_inner_splits=item.get("n_inner_splits", defaults["n_inner_splits"]))


#: A comparison grid's fields and their defaults (only here).
COMPARISON_DEFAULTS = {"strategies": list(ENSEMBLES), "learners": [], "mixed": [],
                       "members": [5, 10], "sample_by": "participant"}
COMPARISON_CONSTRAINTS = {
    "strategies": [ListOf(Options(ENSEMBLES), what="of 'bagging', 'stacking'")],
    "learners": [ListOf(_LEARNER, what="learner names")],
    "mixed": [ListOf(ListOf(_LEARNER, min_length=1, what="learner names"),
                     what="lists of learner names")],
    "members": [ListOf(_MEMBER_COUNT, min_length=1,
                       what="member counts (whole numbers of at least 2)")],
    "sample_by": [Options(SAMPLE_BY)],
}

#: The statistics object's fields, their defaults and limits (only here).
STATISTICS_DEFAULTS = {"permutations": 0, "bootstrap": 1000, "paired_test": False,
                       "paired_splits": 5, "paired_repeats": 5}
STATISTICS_CONSTRAINTS = {
    "permutations": [Interval(Integral, 0, None, closed="left")],
    "bootstrap": [Interval(Integral, 0, None, closed="left")],
    "paired_test": [InstanceOf(bool, "true or false")],
    # The paired comparison's folds are a grouped k-fold scheme: its limits.
    "paired_splits": Scheme._parameter_constraints["n_splits"],
    "paired_repeats": Scheme._parameter_constraints["n_repeats"],
}


def comparison_problems(grid, *, prefix: str = "comparison") -> list[Problem]:
    """Every problem of a comparison grid (paths like ``comparison.members``)."""
    if not isinstance(grid, dict):
        return [Problem(prefix, 'give an object, e.g. {"learners": ["lda"], "members": [5]}')]
    problems = validate(grid, COMPARISON_CONSTRAINTS, prefix=prefix)
    if not problems and not grid.get("learners") and not grid.get("mixed"):
        problems.append(Problem(prefix, "give learners and/or mixed compositions"))
    return problems


def expand_comparison(grid: dict) -> list[ModelSpec]:
    """A grid (strategy × member learner or mixed composition × member count) plus every
    member learner alone as a baseline, as a list of ModelSpec. Raises
    :class:`~cairn_science.params.ParamError` naming each problem of the grid."""
    raise_for(comparison_problems(grid))
    grid = {**COMPARISON_DEFAULTS, **grid}
    strategies, counts, sample_by = grid["strategies"], grid["members"], grid["sample_by"]
    learners = list(grid["learners"])
    mixed = [tuple(combo) for combo in grid["mixed"]]
    models = []
    for learner in learners:
        for n in counts:
            if "bagging" in strategies:
                models.append(model_from_dict({"ensemble": "bagging", "learner": learner,
                                               "n_members": n, "sample_by": sample_by}))
            if "stacking" in strategies:
                models.append(model_from_dict({"ensemble": "stacking",
                                               "name": f"stacking-{learner}-{n}",
                                               "members": [learner] * n}))
    for combo in mixed:
        for n in counts:
            members = [combo[i % len(combo)] for i in range(max(n, len(combo)))]
            if "stacking" in strategies:
                models.append(model_from_dict({
                    "ensemble": "stacking", "members": members,
                    "name": f"stacking-{'+'.join(combo)}-{len(members)}"}))
    baselines = list(dict.fromkeys(learners + [n for combo in mixed for n in combo]))
    models.extend(model_from_dict({"learner": n}) for n in baselines)
    return models


def select_columns(columns: list[str], features: dict) -> list[str]:
    """Feature columns chosen by include/exclude patterns, bands and channels, in table order."""
    out = []
    for column in columns:
        if not any(fnmatch.fnmatchcase(column, p) for p in features.get("include") or ["*"]):
            continue
        if any(fnmatch.fnmatchcase(column, p) for p in features.get("exclude") or []):
            continue
        parts = column.split(".")
        bands, channels = features.get("bands"), features.get("channels")
        if bands and (len(parts) < 3 or parts[0] not in bands):
            continue
        if channels and (len(parts) < 2 or parts[-1] not in channels):
            continue
        out.append(column)
    return out
