"""A training request as plain data: which rows, which label, which features, which validation,
which models, which statistics. ``TrainingSpec.from_dict`` checks it against the feature table
it will run on and raises :class:`SpecError` naming every field that is wrong and what to do.
"""

import fnmatch
from dataclasses import dataclass, field

from .learners import LEARNERS
from .validation import SCHEMES

LABEL_KINDS = ("level", "condition")
NORMALISATIONS = ("none", "baseline", "mean")
ENSEMBLES = ("bagging", "stacking")
DEFAULT_QC = ("pass", "review")


class SpecError(ValueError):
    """Problems with a spec; ``errors`` maps a field to its messages."""

    def __init__(self, errors):
        self.errors = errors
        super().__init__("; ".join(f"{k}: {m}" for k, ms in errors.items() for m in ms))


@dataclass(frozen=True)
class ModelSpec:
    """One model of a run: a learner alone, a bagging of one learner, or a stacking."""

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

    def as_dict(self):
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
    def base_learners(self):
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

    def as_dict(self):
        return {"feature_set": self.feature_set, "label": self.label, "include": self.include,
                "features": self.features, "normalisation": self.normalisation,
                "validation": self.validation, "models": [m.as_dict() for m in self.models],
                "statistics": self.statistics, "seed": self.seed, "release": self.release}

    @classmethod
    def from_dict(cls, data, *, columns=None, sites=None):
        """Check ``data``; ``columns`` (feature column names of the table) and ``sites`` let
        the check name unknown channels, bands, features and sites."""
        errors = {}

        def add(key, message):
            errors.setdefault(key, []).append(message)

        if not isinstance(data, dict):
            raise SpecError({"spec": ["send the spec as a JSON object"]})
        data = dict(data)

        def section(key):
            value = data.get(key)
            if value is None:
                return {}
            if not isinstance(value, dict):
                add(key, f"give an object ({{…}}), not {type(value).__name__} {value!r}")
                return {}
            return value

        known = {"feature_set", "label", "include", "features", "normalisation", "validation",
                 "models", "comparison", "statistics", "seed", "release"}
        for key in sorted(set(data) - known):
            add(key, f"unknown field; known: {', '.join(sorted(known))}")
        feature_set = data.get("feature_set")
        if not isinstance(feature_set, int):
            add("feature_set", "give the id of a feature set (a whole number)")

        label = {"kind": "level", "classes": None, "map": None, **section("label")}
        if label["kind"] not in LABEL_KINDS:
            add("label.kind", f"choose one of {', '.join(LABEL_KINDS)}")
        if label["map"] is not None and not isinstance(label["map"], dict):
            add("label.map", 'give an object from value to class, e.g. {"low": "task"}')

        include = {"sites": None, "qc_verdicts": list(DEFAULT_QC),
                   "min_windows_per_recording": 1, **section("include")}
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

        features = {"include": ["*"], "exclude": [], "bands": None, "channels": None,
                    **section("features")}
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

        normalisation = {"participant": "none", "site_standardise": False,
                         **section("normalisation")}
        if normalisation["participant"] not in NORMALISATIONS:
            add("normalisation.participant", f"choose one of {', '.join(NORMALISATIONS)}")
        if normalisation["participant"] == "baseline" and label["kind"] == "condition":
            add("normalisation.participant",
                "the resting baseline is one of the classes of a condition label; use 'mean' "
                "or 'none'")

        validation = {"scheme": "grouped_kfold", "n_splits": 5, "n_repeats": 1,
                      "test_share": 0.25, **section("validation")}
        if validation["scheme"] not in SCHEMES:
            add("validation.scheme", f"choose one of {', '.join(SCHEMES)}")

        models = []
        listed = data.get("models") or []
        if not isinstance(listed, list):
            add("models", "give a list of models")
            listed = []
        for i, item in enumerate(listed):
            try:
                models.append(model_from_dict(item))
            except ValueError as exc:
                add(f"models[{i}]", str(exc))
        if data.get("comparison"):
            try:
                models.extend(expand_comparison(data["comparison"]))
            except ValueError as exc:
                add("comparison", str(exc))
        names = [m.name for m in models]
        if not models:
            add("models", "list at least one model, or give a comparison grid")
        for name in sorted({n for n in names if names.count(n) > 1}):
            add("models", f"two models are named {name!r}; names must be unique")

        statistics = {"permutations": 0, "bootstrap": 1000, "paired_test": False,
                      "paired_splits": 5, "paired_repeats": 5, **section("statistics")}
        for key in ("permutations", "bootstrap", "paired_splits", "paired_repeats"):
            if not isinstance(statistics[key], int) or statistics[key] < 0:
                add(f"statistics.{key}", "give a whole number ≥ 0")
        seed = data.get("seed", 0)
        if not isinstance(seed, int):
            add("seed", "give a whole number")
        release = {"pooled": True, "per_site": False, "model": None,
                   **section("release")}
        if release["model"] is not None and release["model"] not in names:
            add("release.model", f"{release['model']!r} is not one of the models")
        if errors:
            raise SpecError(errors)
        return cls(feature_set=feature_set, label=label, include=include, features=features,
                   normalisation=normalisation, validation=validation, models=tuple(models),
                   statistics=statistics, seed=seed, release=release)


def _learner(name, where):
    if name not in LEARNERS:
        raise ValueError(f"{where}: unknown learner {name!r}; known: {', '.join(LEARNERS)}")
    return name


def model_from_dict(item):
    item = dict(item)
    ensemble = item.get("ensemble")
    name = item.get("name")
    if ensemble is None:
        learner = _learner(item.get("learner"), "learner")
        return ModelSpec(name=name or learner, learner=learner, params=item.get("params", {}))
    if ensemble == "bagging":
        learner = _learner(item.get("learner"), "learner")
        n = item.get("n_members", 10)
        if not isinstance(n, int) or n < 2:
            raise ValueError("n_members: give a whole number ≥ 2")
        if item.get("sample_by", "participant") not in ("participant", "window"):
            raise ValueError("sample_by: choose 'participant' or 'window'")
        if item.get("voting", "soft") not in ("soft", "hard"):
            raise ValueError("voting: choose 'soft' or 'hard'")
        return ModelSpec(name=name or f"bagging-{learner}-{n}", learner=learner,
                         params=item.get("params", {}), ensemble="bagging", n_members=n,
                         sample_by=item.get("sample_by", "participant"),
                         voting=item.get("voting", "soft"))
    if ensemble == "stacking":
        members = tuple(_learner(m, "members") for m in item.get("members") or [])
        if len(members) < 2:
            raise ValueError("members: a stacking needs at least 2 members")
        meta = _learner(item.get("meta", "logistic"), "meta")
        return ModelSpec(name=name or f"stacking-{'+'.join(members)}", ensemble="stacking",
                         members=members, meta=meta,
                         n_inner_splits=int(item.get("n_inner_splits", 5)))
    raise ValueError(f"ensemble: choose one of {', '.join(ENSEMBLES)} (or leave it out)")


def expand_comparison(grid):
    """A grid (strategy × member learner or mixed composition × member count) plus every
    member learner alone as a baseline, as a list of ModelSpec."""
    strategies = grid.get("strategies", ["bagging", "stacking"])
    learners = [_learner(n, "learners") for n in grid.get("learners", [])]
    mixed = [tuple(_learner(n, "mixed") for n in combo) for combo in grid.get("mixed", [])]
    counts = grid.get("members", [5, 10])
    sample_by = grid.get("sample_by", "participant")
    unknown = sorted(set(strategies) - set(ENSEMBLES))
    if unknown:
        raise ValueError(f"strategies: {', '.join(unknown)} unknown; use bagging, stacking")
    if not learners and not mixed:
        raise ValueError("give learners and/or mixed compositions")
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


def select_columns(columns, features):
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
