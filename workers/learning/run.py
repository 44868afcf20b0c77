"""Evaluating a training spec on a feature table: rows and labels, normalisation, folds,
fitting inside each outer training part only, scores and statistics.

Everything fitted on data (imputation, scaling, per-site standardisation, feature choice,
inner splits of a stacking) is fitted on the outer training rows of a fold; participant
normalisation uses only each participant's own rows and no label of anyone.
"""

from dataclasses import dataclass

import numpy as np

from workers.features.pipeline import feature_columns

from . import metrics, validation
from .spec import select_columns

LEVEL_ORDER = ("low", "moderate", "high")


class DataError(ValueError):
    """The table cannot support the spec (e.g. a class with too few participants)."""


@dataclass
class Data:
    X: np.ndarray
    y: np.ndarray
    labels: list
    participants: np.ndarray  # "site/participant"
    sites: np.ndarray
    blocks: np.ndarray        # one id per block (recording + block onset)
    order: np.ndarray         # window start (s), for time-ordered splits
    columns: list
    rows: np.ndarray          # row numbers in the feature table
    excluded: dict


def _label_values(table, spec):
    label = spec.label
    if label["kind"] == "level":
        values = table["level"].astype(object)
    else:
        values = table["condition"].astype(object)
    if label.get("map"):
        values = values.map(lambda v: label["map"].get(v, v) if v is not None else None)
    return values


def prepare_data(table, spec):
    """Rows, label and features chosen by the spec, with participant normalisation applied."""
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
    values = frame[columns].to_numpy(dtype=float)
    people = (frame["site"].astype(str) + "/" + frame["participant"].astype(str)).to_numpy()

    mode = spec.normalisation["participant"]
    if mode != "none":
        values = values.copy()
        conditions = frame["condition"].astype(object).to_numpy()
        for person in np.unique(people):
            mine = people == person
            if mode == "baseline":
                reference = mine & (conditions == "rest")
                if not reference.any():
                    raise DataError(f"participant {person} has no resting-baseline windows; "
                                    "use normalisation 'mean' or include their rest block")
            else:
                reference = mine
            centre = np.nanmean(values[reference], axis=0)
            spread = np.nanstd(values[reference], axis=0)
            spread = np.where(np.isfinite(spread) & (spread > 0), spread, 1.0)
            values[mine] = (values[mine] - np.nan_to_num(centre)) / spread

    y = _label_values(frame, spec).to_numpy(dtype=object)
    labelled = np.array([v is not None and v == v and v != "" for v in y])
    if spec.label.get("classes"):
        labelled &= np.isin(y.astype(str), spec.label["classes"])
    excluded["no label of the chosen kind"] = int((~labelled).sum())
    frame = frame[labelled]
    values, y, people = values[labelled], y[labelled].astype(str), people[labelled]
    present = sorted(set(y.tolist()), key=lambda v: (LEVEL_ORDER.index(v)
                                                     if v in LEVEL_ORDER else 9, v))
    if len(present) < 2:
        raise DataError(f"only {len(present)} class ({', '.join(present) or 'none'}) left "
                        "after the inclusion rules; a classifier needs at least 2")
    blocks = (frame["site"].astype(str) + "/" + frame["recording"].astype(str) + "@"
              + frame["block_onset_s"].astype(str)).to_numpy()
    return Data(X=values, y=y, labels=present, participants=people,
                sites=frame["site"].astype(str).to_numpy(), blocks=blocks,
                order=frame["window_start_s"].to_numpy(dtype=float), columns=columns,
                rows=frame.index.to_numpy(), excluded=excluded)


def check_classes(data, scheme):
    """Each class needs enough participants for the scheme; raise DataError naming it."""
    needed = {"grouped_kfold": 2, "leave_one_participant_out": 2, "leave_one_site_out": 1,
              "within_participant_time": 1}[scheme.name]
    for label in data.labels:
        people = len(set(data.participants[data.y == label].tolist()))
        if people < needed:
            raise DataError(f"class {label!r} has {people} participant(s); grouped validation "
                            f"needs at least {needed} per class")


def scheme_of(spec):
    v = spec.validation
    return validation.Scheme(name=v["scheme"], n_splits=int(v.get("n_splits", 5)),
                             n_repeats=int(v.get("n_repeats", 1)),
                             test_share=float(v.get("test_share", 0.25)))


def folds_for(spec, data, scheme=None, seed=None):
    scheme = scheme or scheme_of(spec)
    check_classes(data, scheme)
    return validation.outer_folds(scheme, y=data.y, participants=data.participants,
                                  sites=data.sites, order=data.order,
                                  seed=spec.seed if seed is None else seed)


def build_estimator(model, *, seed):
    """The unfitted estimator for a ModelSpec: imputation and scaling, then the model."""
    from sklearn.impute import SimpleImputer
    from sklearn.pipeline import Pipeline
    from sklearn.preprocessing import StandardScaler

    from .ensembles import GroupBaggingClassifier, GroupStackingClassifier
    from .learners import make_learner

    if model.ensemble is None:
        core = make_learner(model.learner, model.params, random_state=seed)
    elif model.ensemble == "bagging":
        core = GroupBaggingClassifier(make_learner(model.learner, model.params,
                                                   random_state=seed),
                                      n_estimators=model.n_members, sample_by=model.sample_by,
                                      voting=model.voting, random_state=seed)
    else:
        members = [(f"{name}-{i}", make_learner(name, random_state=seed + i))
                   for i, name in enumerate(model.members)]
        core = GroupStackingClassifier(members, final_estimator=make_learner(
            model.meta, random_state=seed), n_inner_splits=model.n_inner_splits,
            random_state=seed)
    return Pipeline([("impute", SimpleImputer(strategy="median", keep_empty_features=True)),
                     ("scale", StandardScaler()), ("model", core)])


def needs_groups(model):
    """True when the model's fit takes the participant of each row: ensembles, and learners
    whose internal split (probability calibration) is grouped by participant."""
    from .learners import LEARNERS

    return model.ensemble is not None or LEARNERS[model.learner].grouped


def site_standardise(X, sites, train):
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


def fit_fold(model, data, fold, *, seed, site_standardise_on=False):
    """Fit on the fold's training rows, predict its test rows. Returns (estimator, y_pred)."""
    X = site_standardise(data.X, data.sites, fold.train) if site_standardise_on else data.X
    estimator = build_estimator(model, seed=seed)
    kwargs = {"model__groups": data.participants[fold.train]} if needs_groups(model) else {}
    estimator.fit(X[fold.train], data.y[fold.train], **kwargs)
    return estimator, estimator.predict(X[fold.test])


def fold_result(model, data, fold, *, seed, site_standardise_on=False):
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


def pooled(results, data):
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


def evaluate(spec, data, *, models=None, folds=None):
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
