"""Evaluating a training spec on a feature table: rows and labels, normalisation, folds,
fitting inside each outer training part only, scores and statistics.

Everything fitted on data (imputation, scaling, per-site standardisation, feature choice,
inner splits of a stacking) is fitted on the outer training rows of a fold. Participant
normalisation is computed inside each fold too (:func:`participant_normalise`): each
person's statistics come from their own windows that the fold may use, never from a label,
and under the time-ordered scheme never from their later (test) part.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from cairn_science.features.pipeline import feature_columns

from . import metrics, validation
from .learners import LEARNERS, make_learner
from .spec import select_columns

if TYPE_CHECKING:
    import pandas as pd
    from sklearn.pipeline import Pipeline

    from .spec import ModelSpec, TrainingSpec
    from .validation import Fold, Scheme

LEVEL_ORDER = ("low", "moderate", "high")


class DataError(ValueError):
    """The table cannot support the spec (e.g. a class with too few participants)."""


@dataclass
class Reference:
    """Every included window, labelled or not, as participant normalisation sees it: raw
    values, owner, place in time (recording rank, start in s) and whether it is a resting
    baseline window (condition "rest")."""

    X: np.ndarray
    participants: np.ndarray
    recordings: np.ndarray
    order: np.ndarray
    rest: np.ndarray


@dataclass
class Data:
    X: np.ndarray             # for a release fitted on every row: normalised by all of each
    #                           participant's own reference windows (evaluation: fold_matrix)
    y: np.ndarray
    labels: list
    participants: np.ndarray  # "site/participant"
    sites: np.ndarray
    blocks: np.ndarray        # one id per block (recording + block onset)
    order: np.ndarray         # window start (s), for time-ordered splits
    columns: list
    rows: np.ndarray          # row numbers in the feature table
    excluded: dict
    X_raw: np.ndarray | None = None       # before participant normalisation
    recordings: np.ndarray | None = None  # rank of the row's recording in time order
    sessions: np.ndarray | None = None    # rank of the row's session in time order
    window_s: float | None = None         # window length (s), for the time-ordered gap
    normalisation: str = "none"           # spec.normalisation["participant"]
    reference: Reference | None = None


def _label_values(table, spec):
    label = spec.label
    if label["kind"] == "level":
        values = table["level"].astype(object)
    else:
        values = table["condition"].astype(object)
    if label.get("map"):
        values = values.map(lambda v: label["map"].get(v, v) if v is not None else None)
    return values


def scale_order(classes: set, frame: pd.DataFrame, spec: TrainingSpec) -> list[str]:
    """The classes in the rating scale's order, never alphabetical: workload levels by the
    lowest rating among their windows (a scale's levels are disjoint ranges of ratings, so
    this is the protocol's order whatever the levels are called), then low, moderate, high
    for levels without ratings; conditions and mapped labels by name."""
    import pandas as pd

    lowest = {}
    if spec.label["kind"] == "level" and not spec.label.get("map") and "rating" in frame:
        ratings = pd.to_numeric(frame["rating"], errors="coerce")
        lowest = ratings.groupby(frame["level"].astype(str)).min().dropna().to_dict()

    def key(value):
        if value in lowest:
            return (0, float(lowest[value]), value)
        return (1, LEVEL_ORDER.index(value) if value in LEVEL_ORDER else 9, value)

    return sorted(classes, key=key)


def _natural(value):
    """Sort key of a BIDS label in natural order ("2" before "10"); empty or missing first."""
    import pandas as pd

    text = "" if value is None or (not isinstance(value, str) and pd.isna(value)) else str(value)
    return tuple((0, int(part), "") if part.isdigit() else (1, 0, part)
                 for part in re.findall(r"\d+|\D+", text))


def _ranks(frame, columns):
    """Per row, the rank of its (columns) in natural sort order: the time order Cairn can
    know from BIDS labels (session, then run, then file name)."""
    keys = list(frame[columns].itertuples(index=False, name=None))
    natural = {key: tuple(_natural(v) for v in key) for key in set(keys)}
    rank = {key: i for i, key in enumerate(sorted(natural, key=natural.get))}
    return np.array([rank[key] for key in keys], dtype=np.intp)


def prepare_data(table: pd.DataFrame, spec: TrainingSpec, *,
                 window_s: float | None = None) -> Data:
    """Rows, label and features chosen by the spec. ``X`` is normalised by participant as a
    release fitted on every row is; evaluation normalises inside each fold
    (:func:`fold_matrix`). ``window_s`` is the feature set's window length (s)."""
    import pandas as pd

    excluded = {}
    keep = pd.Series(True, index=table.index)
    if spec.include.get("sites"):
        inside = table["site"].isin(spec.include["sites"])
        excluded["other sites"] = int((~inside & keep).sum())
        keep &= inside
    verdict_ok = table["qc_verdict"].isin(spec.include["qc_verdicts"])
    excluded["quality verdict"] = int((~verdict_ok & keep).sum())
    keep &= verdict_ok
    per_recording = table[keep].groupby("recording")["window_start_s"].transform("size")
    enough = pd.Series(False, index=table.index)
    enough[per_recording.index] = per_recording >= spec.include["min_windows_per_recording"]
    excluded["too few windows in the recording"] = int((~enough & keep).sum())
    keep &= enough

    columns = select_columns(feature_columns(table.columns), spec.features)
    frame = table[keep].copy()
    raw = frame[columns].to_numpy(dtype=float)
    people = (frame["site"].astype(str) + "/" + frame["participant"].astype(str)).to_numpy()
    recordings = _ranks(frame, ["site", "participant", "session", "run", "recording"])
    sessions = _ranks(frame, ["site", "participant", "session"])
    order = frame["window_start_s"].to_numpy(dtype=float)

    y = _label_values(frame, spec).to_numpy(dtype=object)
    labelled = np.array([v is not None and v == v and v != "" for v in y], dtype=bool)
    if spec.label.get("classes"):
        labelled &= np.isin(y.astype(str), spec.label["classes"])
    excluded["no label of the chosen kind"] = int((~labelled).sum())
    reference = Reference(X=raw, participants=people, recordings=recordings, order=order,
                          rest=(frame["condition"].astype(object) == "rest").to_numpy())
    labelled_frame = frame[labelled]
    y = y[labelled].astype(str)
    present = scale_order(set(y.tolist()), labelled_frame, spec)
    if len(present) < 2:
        raise DataError(f"only {len(present)} class ({', '.join(present) or 'none'}) left "
                        "after the inclusion rules; a classifier needs at least 2")
    blocks = (labelled_frame["site"].astype(str) + "/" + labelled_frame["recording"].astype(str)
              + "@" + labelled_frame["block_onset_s"].astype(str)).to_numpy()
    data = Data(X=raw[labelled], y=y, labels=present, participants=people[labelled],
                sites=labelled_frame["site"].astype(str).to_numpy(), blocks=blocks,
                order=order[labelled], columns=columns, rows=labelled_frame.index.to_numpy(),
                excluded=excluded, X_raw=raw[labelled], recordings=recordings[labelled],
                sessions=sessions[labelled], window_s=None if window_s is None
                else float(window_s), normalisation=spec.normalisation["participant"],
                reference=reference)
    data.X = participant_normalise(data)
    return data


def normalisation_rule(mode: str, scheme_name: str) -> str:
    """What participant normalisation does in each fold, in words for the run page ("" for
    none)."""
    if mode == "none":
        return ""
    own = ("their own resting-baseline windows (condition 'rest')" if mode == "baseline"
           else "their own windows")
    words = (f"Participant normalisation ({mode}), inside each fold, without any label: each "
             f"person's features are centred on the mean and divided by the SD of {own}")
    if scheme_name == "within_participant_time":
        return (f"{words} in their training (earlier) part; their test (later) part is "
                "normalised with those same statistics, never with its own.")
    held_out = ("their resting windows only" if mode == "baseline"
                else "the windows being classified: their feature values, never their labels, "
                     "as a release is used on a new person's recording (choose 'baseline' to "
                     "use their resting windows only)")
    return (f"{words}; for a training person these are in the training part, for a held-out "
            f"person {held_out}.")


def reference_windows(data: Data, person: str, fold: Fold | None = None) -> np.ndarray:
    """Indices (into ``data.reference``) of the windows whose statistics normalise
    ``person``'s rows in ``fold`` (``None``: a release fitted on every row).

    All of the person's own included windows ("mean") or their resting windows
    ("baseline"); when the person is on both sides of the fold (time-ordered scheme), only
    those no later than their last training window (recording rank, then start)."""
    ref = data.reference
    mine = ref.participants == person
    if data.normalisation == "baseline":
        mine &= ref.rest
    if fold is not None:
        own = data.participants == person
        train, test = fold.train[own[fold.train]], fold.test[own[fold.test]]
        if train.size and test.size:
            last = train[np.lexsort((data.order[train], data.recordings[train]))[-1]]
            rank, start = data.recordings[last], data.order[last]
            mine &= (ref.recordings < rank) | ((ref.recordings == rank) & (ref.order <= start))
    return np.flatnonzero(mine)


def participant_normalise(data: Data, fold: Fold | None = None) -> np.ndarray:
    """``data.X_raw`` with each participant's rows centred and scaled by the statistics of
    their :func:`reference_windows` in ``fold``; raises DataError naming a participant who
    has none."""
    if data.normalisation == "none":
        return data.X_raw
    out = np.array(data.X_raw, dtype=float, copy=True)
    for person in np.unique(data.participants):
        windows = reference_windows(data, person, fold)
        if not windows.size:
            where = " before their test part (time order)" if fold is not None else ""
            raise DataError(f"participant {person} has no resting-baseline windows{where}; "
                            "use normalisation 'mean' or include their rest block")
        values = data.reference.X[windows]
        centre = np.nanmean(values, axis=0)
        spread = np.nanstd(values, axis=0)
        spread = np.where(np.isfinite(spread) & (spread > 0), spread, 1.0)
        rows = data.participants == person
        out[rows] = (data.X_raw[rows] - np.nan_to_num(centre)) / spread
    return out


def fold_matrix(data: Data, fold: Fold, *, site_standardise_on: bool = False) -> np.ndarray:
    """The features a fold fits and predicts on: participant normalisation and per-site
    standardisation with the statistics this fold may use."""
    X = participant_normalise(data, fold) if data.normalisation != "none" else data.X
    return site_standardise(X, data.sites, fold.train) if site_standardise_on else X


def check_classes(data: Data, scheme: Scheme) -> None:
    """Each class needs enough participants for the scheme; raise DataError naming it."""
    needed = {"grouped_kfold": 2, "leave_one_participant_out": 2, "leave_one_site_out": 1,
              "within_participant_time": 1}[scheme.name]
    for label in data.labels:
        people = len(set(data.participants[data.y == label].tolist()))
        if people < needed:
            raise DataError(f"class {label!r} has {people} participant(s); grouped validation "
                            f"needs at least {needed} per class")


def scheme_of(spec: TrainingSpec) -> Scheme:
    v = spec.validation
    return validation.Scheme(name=v["scheme"], n_splits=int(v.get("n_splits", 5)),
                             n_repeats=int(v.get("n_repeats", 1)),
                             test_share=float(v.get("test_share", 0.25)))


def folds_for(spec: TrainingSpec, data: Data, scheme: Scheme | None = None,
              seed: int | None = None) -> list[Fold]:
    scheme = scheme or scheme_of(spec)
    check_classes(data, scheme)
    folds = validation.outer_folds(scheme, y=data.y, participants=data.participants,
                                   sites=data.sites, order=data.order,
                                   recordings=data.recordings, sessions=data.sessions,
                                   window_s=data.window_s,
                                   seed=spec.seed if seed is None else seed)
    if data.normalisation != "none":
        for fold in folds:  # a participant without reference windows fails here, in words
            participant_normalise(data, fold)
    return folds


def build_estimator(model: ModelSpec, *, seed: int) -> Pipeline:
    """The unfitted estimator for a ModelSpec: imputation and scaling, then the model."""
    from sklearn.impute import SimpleImputer
    from sklearn.pipeline import Pipeline
    from sklearn.preprocessing import StandardScaler

    from .ensembles import GroupBaggingClassifier, GroupStackingClassifier
    from .recurrent import confine_members

    if model.ensemble is None:
        core = make_learner(model.learner, model.params, random_state=seed)
    elif model.ensemble == "bagging":
        core = GroupBaggingClassifier(make_learner(model.learner, model.params,
                                                   random_state=seed),
                                      n_estimators=model.n_members, sample_by=model.sample_by,
                                      voting=model.voting, random_state=seed)
    else:
        members = confine_members([(f"{name}-{i}", make_learner(name, random_state=seed + i))
                                   for i, name in enumerate(model.members)])
        core = GroupStackingClassifier(members, final_estimator=make_learner(
            model.meta, random_state=seed), n_inner_splits=model.n_inner_splits,
            random_state=seed)
    return Pipeline([("impute", SimpleImputer(strategy="median", keep_empty_features=True)),
                     ("scale", StandardScaler()), ("model", core)])


def needs_groups(model: ModelSpec) -> bool:
    """True when the model's fit takes the participant of each row: ensembles, and learners
    whose internal split (probability calibration) is grouped by participant."""
    return model.ensemble is not None or LEARNERS[model.learner].grouped


def site_standardise(X: np.ndarray, sites: np.ndarray, train: np.ndarray) -> np.ndarray:
    """Standardise each site's rows by that site's training rows (a site without training
    rows, e.g. in leave-one-site-out, by all training rows)."""
    out = np.array(X, dtype=float, copy=True)
    pooled_mean = np.nanmean(X[train], axis=0)
    pooled_sd = np.nanstd(X[train], axis=0)
    train_mask = np.zeros(len(X), dtype=bool)
    train_mask[train] = True
    for site in np.unique(sites):
        rows = sites == site
        ref = rows & train_mask
        mean = np.nanmean(X[ref], axis=0) if ref.any() else pooled_mean
        sd = np.nanstd(X[ref], axis=0) if ref.any() else pooled_sd
        sd = np.where(np.isfinite(sd) & (sd > 0), sd, 1.0)
        out[rows] = (X[rows] - np.nan_to_num(mean)) / sd
    return out


def model_inputs(model: ModelSpec, data: Data, X: np.ndarray) -> np.ndarray:
    """``X`` as the model reads it: a model with a recurrent learner also reads each row's
    recording and window start (sequence keys; the learner builds each row's sequence only
    from the rows it is given, so never across the fold's parts)."""
    from .recurrent import uses_sequences, with_sequence_keys

    return with_sequence_keys(X, data.recordings, data.order) if uses_sequences(model) else X


def fit_fold(model: ModelSpec, data: Data, fold: Fold, *, seed: int,
             site_standardise_on: bool = False) -> tuple[Pipeline, np.ndarray]:
    """Fit on the fold's training rows, predict its test rows. Returns (estimator, y_pred)."""
    X = model_inputs(model, data, fold_matrix(data, fold,
                                              site_standardise_on=site_standardise_on))
    estimator = build_estimator(model, seed=seed)
    kwargs = {"model__groups": data.participants[fold.train]} if needs_groups(model) else {}
    estimator.fit(X[fold.train], data.y[fold.train], **kwargs)
    return estimator, estimator.predict(X[fold.test])


def fold_result(model: ModelSpec, data: Data, fold: Fold, *, seed: int,
                site_standardise_on: bool = False) -> dict:
    """Scores of one fold, JSON-ready, with the test rows' predictions."""
    _, predicted = fit_fold(model, data, fold, seed=seed, site_standardise_on=site_standardise_on)
    truth = data.y[fold.test]
    return {"model": model.name, "fold": fold.index, "repeat": fold.repeat,
            "held_out": list(fold.held_out), "n_train": int(fold.train.size),
            "n_test": int(fold.test.size),
            "scores": metrics.scores(truth, predicted, labels=data.labels),
            "per_site": metrics.per_site(truth, predicted, data.sites[fold.test],
                                         labels=data.labels),
            "test_rows": data.rows[fold.test].tolist(), "predicted": predicted.tolist()}


def pooled(results: Sequence[dict], data: Data) -> dict:
    """Scores of all folds' predictions together, per-fold summaries, per site."""
    position = {row: i for i, row in enumerate(data.rows.tolist())}
    first_repeat = [r for r in results if r["repeat"] == 0]
    rows = [position[row] for r in first_repeat for row in r["test_rows"]]
    predicted = np.array([p for r in first_repeat for p in r["predicted"]], dtype=object)
    truth = data.y[rows]
    per_fold = {key: metrics.summarise([r["scores"][key] for r in results])
                for key in ("accuracy", "balanced_accuracy", "macro_f1", "kappa")}
    return {
        "pooled": metrics.scores(truth, predicted.astype(str), labels=data.labels),
        "per_fold": per_fold,
        "per_site": metrics.per_site(truth, predicted.astype(str), data.sites[rows],
                                     labels=data.labels),
        "chance": metrics.chance_level(data.y, labels=data.labels),
        "ci": metrics.participant_bootstrap_ci(truth, predicted.astype(str),
                                               data.participants[rows], labels=data.labels,
                                               n_boot=1000, seed=0),
        "n_folds": len(results),
    }


def evaluate(spec: TrainingSpec, data: Data, *, models: Sequence[ModelSpec] | None = None,
             folds: Sequence[Fold] | None = None) -> dict[str, dict]:
    """Every model on the same outer folds, in this process (what the jobs do in parallel)."""
    models = models or spec.models
    folds = folds if folds is not None else folds_for(spec, data)
    site_on = bool(spec.normalisation.get("site_standardise"))
    out = {}
    for model in models:
        results = [fold_result(model, data, fold, seed=spec.seed, site_standardise_on=site_on)
                   for fold in folds]
        out[model.name] = {"folds": results, **pooled(results, data)}
    return out
