"""Training runs as jobs: a coordinating job checks the spec against the data and queues one
job per (model, fold); the job that stores the last fold queues the finishing job, which
pools the scores, runs the statistics and fits the releases."""

import json
from functools import lru_cache

from django.utils import timezone

from portal.audit.events import record
from portal.datasets import blobs
from portal.jobs.services import JobError, enqueue
from portal.training.fingerprint import training_fingerprint
from portal.training.models import FoldScore, ModelRelease, RunState, TrainingRun
from portal.training.summary import best_model as _best
from portal.training.summary import evaluation as _evaluation
from portal.training.summary import plain
from portal.training.summary import selection as _selection

CAUTION = ("Research use only. Not a medical device; not for decisions about any person's "
           "fitness for duty, health or employment. Trained on research participants under "
           "ethics approval; use it only within an approved research protocol and under "
           "local data-protection law.")


@lru_cache(maxsize=2)
def _table(sha256):
    import pandas as pd

    with blobs.open_blob(sha256) as fh:
        return pd.read_parquet(fh)


@lru_cache(maxsize=4)
def _prepared(sha256, spec_json, window_s):
    from cairn_science.learning.run import prepare_data
    from cairn_science.learning.spec import TrainingSpec

    spec = TrainingSpec.from_dict(json.loads(spec_json))
    return spec, prepare_data(_table(sha256), spec, window_s=window_s)


def load(run):
    """(spec, data) of a run, cached per worker process; the feature set's window length
    goes with the data (the time-ordered split's gap)."""
    from cairn_science.learning.run import DataError

    window_s = (run.feature_set.params.get("preprocessing") or {}).get("window_s")
    try:
        return _prepared(run.feature_set.table_sha256, json.dumps(run.spec, sort_keys=True),
                         window_s)
    except DataError as exc:
        raise JobError(str(exc)) from None


def plan(spec, data):
    """{"outer": folds, "paired": folds or None, "pairs": [(ensemble, learner model)]}."""
    from cairn_science.learning import validation
    from cairn_science.learning.run import DataError, folds_for, scheme_of

    try:
        outer = folds_for(spec, data)
    except (DataError, validation.SchemeError) as exc:
        raise JobError(str(exc)) from None
    singles = {m.learner: m.name for m in spec.models if m.ensemble is None}
    pairs = [(m.name, singles[base]) for m in spec.models if m.ensemble is not None
             for base in m.base_learners if base in singles]
    paired = None
    scheme = scheme_of(spec)
    if spec.statistics.get("paired_test") and pairs:
        if scheme.name == "grouped_kfold" and scheme.n_repeats * scheme.n_splits >= 10:
            paired = "outer"
        else:
            try:
                paired = folds_for(spec, data, validation.Scheme(
                    "grouped_kfold", n_splits=spec.statistics["paired_splits"],
                    n_repeats=spec.statistics["paired_repeats"]))
            except (DataError, validation.SchemeError) as exc:
                raise JobError(f"paired test: {exc}") from None
    return {"outer": outer, "paired": paired, "pairs": pairs}


def _paired_models(spec, pairs):
    names = {name for pair in pairs for name in pair}
    return [m for m in spec.models if m.name in names]


def run_run(ctx):
    run = TrainingRun.objects.select_related("feature_set").get(pk=ctx.job.target_id)
    spec, data = load(run)
    layout = plan(spec, data)
    jobs = [(m.name, f.index, "outer") for m in spec.models for f in layout["outer"]]
    if isinstance(layout["paired"], list):
        jobs += [(m.name, f.index, "paired") for m in _paired_models(spec, layout["pairs"])
                 for f in layout["paired"]]
    from cairn_science.learning.run import normalisation_rule, scheme_of

    scheme = scheme_of(spec)
    outer = layout["outer"]
    summary = {"rows": int(data.X.shape[0]), "features": len(data.columns),
               "classes": {label: int((data.y == label).sum()) for label in data.labels},
               "participants": int(len(set(data.participants.tolist()))),
               "sites": sorted(set(data.sites.tolist())), "excluded_rows": data.excluded,
               "outer_folds": len(outer),
               "paired_folds": (len(layout["paired"]) if isinstance(layout["paired"], list)
                                else layout["paired"]),
               "left_out_in_gaps": int(len(data.y) - outer[0].train.size - outer[0].test.size)
               if not scheme.grouped else 0,
               "normalisation_rule": normalisation_rule(spec.normalisation["participant"],
                                                        scheme.name)}
    with ctx.finish() as job:
        TrainingRun.objects.filter(pk=run.pk).update(
            n_expected=len(jobs), data_summary=summary, warning=scheme.warning)
        for model, fold, purpose in jobs:
            enqueue("training.fold", target=run, study=run.study,
                    params={"run": run.pk, "model": model, "fold": fold, "purpose": purpose})
        job.result = {"fold_jobs": len(jobs)}


def _folds(spec, data, purpose):
    layout = plan(spec, data)
    if purpose == "outer" or layout["paired"] == "outer":
        return layout["outer"]
    return layout["paired"]


def run_fold(ctx):
    from cairn_science.learning.run import fold_result

    run = TrainingRun.objects.select_related("feature_set").get(pk=ctx.params["run"])
    spec, data = load(run)
    model = next(m for m in spec.models if m.name == ctx.params["model"])
    fold = _folds(spec, data, ctx.params["purpose"])[ctx.params["fold"]]
    ctx.progress(0, 1, f"{model.name}, fold {fold.index + 1}")
    result = fold_result(model, data, fold, seed=spec.seed,
                         site_standardise_on=bool(spec.normalisation.get("site_standardise")))
    with ctx.finish() as job:
        TrainingRun.objects.select_for_update().filter(pk=run.pk).first()
        FoldScore.objects.get_or_create(run=run, model=model.name,
                                        purpose=ctx.params["purpose"], fold=fold.index,
                                        defaults={"result": plain(result)})
        job.result = {"balanced_accuracy": result["scores"]["balanced_accuracy"]}
        run.refresh_from_db()
        if run.folds.count() >= run.n_expected and TrainingRun.objects.filter(
                pk=run.pk, finish_queued=False).update(finish_queued=True):
            enqueue("training.finish", target=run, study=run.study, params={"run": run.pk})


def statistics(spec, data, results, scores_by_purpose, layout):
    """Paired comparisons of ensembles, how the release model was chosen, and the block
    permutation test of that choice: with several candidates each permutation repeats the
    choice (every candidate is scored on the permuted labels and the best score is the null
    value), so the p-value accounts for the selection; the naive p-value of the chosen model
    alone comes from the same permutations."""
    import numpy as np

    from cairn_science.learning import metrics
    from cairn_science.learning.run import fold_result

    out = {"paired": [], "permutation": None,
           "selection": _selection(spec, results, scores_by_purpose["outer"])}
    if layout["paired"] is not None:
        purpose = "outer" if layout["paired"] == "outer" else "paired"
        for ensemble, single in layout["pairs"]:
            a = sorted(scores_by_purpose[purpose][ensemble], key=lambda r: r["fold"])
            b = sorted(scores_by_purpose[purpose][single], key=lambda r: r["fold"])
            comparison = metrics.paired_comparison(
                [r["scores"]["balanced_accuracy"] for r in a],
                [r["scores"]["balanced_accuracy"] for r in b],
                n_train=sum(r["n_train"] for r in a) / len(a),
                n_test=sum(r["n_test"] for r in a) / len(a))
            out["paired"].append({"ensemble": ensemble, "learner": single,
                                  "metric": "balanced_accuracy", **comparison})
    n_perm = spec.statistics.get("permutations", 0)
    if n_perm:
        name = _best(spec, results)
        # the chosen model, then the others from the best observed score down: a permutation
        # stops at the first candidate that reaches the observed score (metrics explains)
        candidates = [m for m in spec.models if m.name == name]
        if out["selection"]["how"] != "named":
            candidates += sorted((m for m in spec.models if m.name != name), key=lambda m: (
                -results[m.name]["pooled"]["balanced_accuracy"], m.name))
        folds = [fold for fold in layout["outer"] if not fold.repeat]
        scored = np.zeros(len(data.y), dtype=bool)
        for fold in folds:
            scored[fold.test] = True
        site_on = bool(spec.normalisation.get("site_standardise"))

        def predict_model(y_permuted, k):
            shuffled = type(data)(**{**data.__dict__, "y": np.asarray(y_permuted)})
            predicted = np.full(len(data.y), "", dtype=object)
            for fold in folds:
                r = fold_result(candidates[k], shuffled, fold, seed=spec.seed,
                                site_standardise_on=site_on)
                predicted[fold.test] = r["predicted"]
            return predicted.astype(str)

        test = metrics.selection_permutation_test(
            predict_model, data.y, data.blocks, data.participants, n_models=len(candidates),
            chosen=0, n_permutations=n_perm, seed=spec.seed,
            observed=results[name]["pooled"]["balanced_accuracy"], labels=data.labels,
            scored=scored)
        out["permutation"] = {"model": name, "selection": out["selection"]["how"],
                              "n_folds": len(folds), "n_fits": test["n_fitted"] * len(folds),
                              "max_fits": n_perm * len(candidates) * len(folds), **test}
    return out


def run_finish(ctx):
    from cairn_science.learning.run import pooled

    run = TrainingRun.objects.select_related("feature_set", "study").get(pk=ctx.job.target_id)
    if run.state == RunState.DONE:
        with ctx.finish() as job:
            job.result = {"already": True}
        return
    spec, data = load(run)
    layout = plan(spec, data)
    by_purpose = {"outer": {}, "paired": {}}
    for score in run.folds.all():
        by_purpose[score.purpose].setdefault(score.model, []).append(score.result)
    ctx.progress(0, 3, "pooling scores")
    results = {}
    for model in spec.models:
        folds = sorted(by_purpose["outer"][model.name], key=lambda r: r["fold"])
        summary = pooled(folds, data)
        summary["fold_scores"] = [{"fold": r["fold"], "repeat": r["repeat"],
                                   "held_out": r["held_out"], **r["scores"]} for r in folds]
        results[model.name] = summary
    ctx.progress(1, 3, "statistics")
    stats = statistics(spec, data, results, by_purpose, layout)
    ctx.progress(2, 3, "fitting the releases")
    releases = fit_releases(run, spec, data, results, stats) if spec.release.get("pooled") \
        else []
    with ctx.finish() as job:
        TrainingRun.objects.filter(pk=run.pk).update(
            state=RunState.DONE, finished_at=timezone.now(),
            results=plain({"models": results, "statistics": stats,
                           "release_model": _best(spec, results), "labels": data.labels}))
        stored = []
        for item in releases:
            release = ModelRelease.objects.create(run=run, **{
                k: (plain(v) if k == "scores" else v) for k, v in item.items()})
            stored.append(release)
            record("release.created", target=release, study=run.study, worker=True,
                   site=item.get("trained_on_site"),
                   summary=f"release {release.pk}: {release.model} ({release.kind}), awaiting "
                           "approval",
                   inputs=[{"training_run": run.pk, "feature_set": run.feature_set_id,
                            "table_sha256": run.feature_set.table_sha256}],
                   outputs=[{"release": release.pk, "model_sha256": release.model_sha256,
                             "model_digest": release.model_digest,
                             "card_sha256": release.card_sha256,
                             "spec_sha256": release.spec_sha256}])
        best = results[_best(spec, results)]["per_fold"]["balanced_accuracy"]
        record("training.finished", target=run, study=run.study, worker=True,
               summary=f"training run {run.pk}: {len(results)} model(s); "
                       f"{_best(spec, results)} balanced accuracy {best['mean']:.3f} ± "
                       f"{(best['sd'] or 0):.3f} SD over {best['n']} folds",
               params={"spec_digest": run.spec_digest, "code_version": run.code_version},
               inputs=[{"feature_set": run.feature_set_id,
                        "table_sha256": run.feature_set.table_sha256}],
               outputs=[{"model": name, "balanced_accuracy_mean":
                         r["per_fold"]["balanced_accuracy"]["mean"],
                         "balanced_accuracy_sd": r["per_fold"]["balanced_accuracy"]["sd"]}
                        for name, r in results.items()]
               + [{"release": r.pk, "model_sha256": r.model_sha256} for r in stored]
               + [{"training_run": run.pk, "fingerprint": training_fingerprint(run)}])
        job.result = {"models": len(results), "releases": len(stored)}


def fit_releases(run, spec, data, results, stats=None):
    """The release model fitted on all included rows (pooled), and per site if asked; each
    release carries the evaluation of exactly the model it holds."""
    import numpy as np

    from portal.accounts.models import Site

    name = _best(spec, results)
    model = next(m for m in spec.models if m.name == name)
    pooled = {**_evaluation(results[name]), "permutation": (stats or {}).get("permutation"),
              "selection": (stats or {}).get("selection")}
    out = [_release(run, spec, data, model, {"evaluation": "pooled", "scheme": spec.validation,
                                             **pooled},
                    rows=np.arange(len(data.y)), kind="pooled", site=None)]
    if spec.release.get("per_site"):
        for slug in sorted(set(data.sites.tolist())):
            rows = np.flatnonzero(data.sites == slug)
            if len(set(data.y[rows].tolist())) < 2 or len(set(
                    data.participants[rows].tolist())) < 2:
                continue
            scores = {**site_evaluation(spec, data, model, rows), "site": slug,
                      "scheme": spec.validation, "pooled_model": {
                          "model": name, "scheme": spec.validation, **_evaluation(
                              results[name])}}
            out.append(_release(run, spec, data, model, scores, rows=rows,
                                kind="site_only", site=Site.objects.get(slug=slug)))
    return out


def subset(data, rows):
    """The prepared data restricted to ``rows`` (every per-row array), with the classes
    present there."""
    import numpy as np

    n = len(data.y)
    fields = {key: (value[rows] if isinstance(value, np.ndarray) and value.ndim
                    and value.shape[0] == n else value)
              for key, value in data.__dict__.items()}
    present = set(fields["y"].tolist())
    fields["labels"] = [label for label in data.labels if label in present]
    return type(data)(**fields)


def site_evaluation(spec, data, model, rows):
    """A site-only model's own evaluation: the spec's validation scheme on that site's rows
    alone (folds from ``outer_folds`` over the site's participants), the same learner and
    seed. ``{"evaluation": "site_only", …scores, "folds": [who trained and who was tested]}``,
    or ``{"evaluation": "none", "no_evaluation": why}`` when the site cannot support the
    scheme (e.g. too few participants)."""
    from cairn_science.learning import validation
    from cairn_science.learning.run import DataError, evaluate, folds_for

    site_data = subset(data, rows)
    try:
        folds = folds_for(spec, site_data)
    except (DataError, validation.SchemeError) as exc:
        scheme = spec.validation["scheme"]
        return {"evaluation": "none",
                "no_evaluation": "validation by "
                                 f"{validation.SCHEME_WORDS.get(scheme, scheme)} cannot be run "
                                 f"on this site's data alone ({exc})"}
    result = evaluate(spec, site_data, models=[model], folds=folds)[model.name]
    return {"evaluation": "site_only", **_evaluation(result),
            "folds": [{"fold": f.index, "repeat": f.repeat,
                       "train_participants": sorted(set(
                           site_data.participants[f.train].tolist())),
                       "test_participants": sorted(set(
                           site_data.participants[f.test].tolist()))} for f in folds]}


def _release(run, spec, data, model, scores, *, rows, kind, site):
    import numpy as np

    from cairn_science.learning.canonical import model_digest, skops_bytes, trusted_types
    from cairn_science.learning.recurrent import uses_sequences
    from cairn_science.learning.run import (
        build_estimator,
        model_inputs,
        needs_groups,
        site_standardise,
    )
    from cairn_science.release import (
        SCIENCE_DEPENDENCIES,
        bundle,
        feature_specification,
        model_card,
        release_requirements,
    )

    X = data.X
    site_stats = None
    if spec.normalisation.get("site_standardise"):
        X = site_standardise(data.X, data.sites, rows)
        site_stats = {s: {"mean": np.nanmean(data.X[rows][data.sites[rows] == s], axis=0
                                             ).tolist(),
                          "sd": np.nanstd(data.X[rows][data.sites[rows] == s], axis=0).tolist()}
                      for s in sorted(set(data.sites[rows].tolist()))}
    X = model_inputs(model, data, X)
    estimator = build_estimator(model, seed=spec.seed)
    kwargs = {"model__groups": data.participants[rows]} if needs_groups(model) else {}
    estimator.fit(X[rows], data.y[rows], **kwargs)
    payload = skops_bytes(estimator)
    model_sha, _ = blobs.put_bytes(payload)
    trusted = trusted_types(payload)
    features = feature_specification(
        feature_set_params=run.feature_set.params, columns=data.columns, labels=data.labels,
        label=spec.label, normalisation=spec.normalisation, site_stats=site_stats,
        model_sha256=model_sha, trusted=trusted, caution=CAUTION)
    features_bytes = json.dumps(features, indent=2, sort_keys=True).encode()
    spec_sha, _ = blobs.put_bytes(features_bytes)
    training = {"sites": sorted(set(data.sites[rows].tolist())),
                "participants": int(len(set(data.participants[rows].tolist()))),
                "windows": int(len(rows)), "qc_verdicts": spec.include["qc_verdicts"],
                "label": spec.label, "labels": data.labels,
                "feature_set": run.feature_set_id, "training_run": run.pk}
    card = model_card(estimator, name=model.name, kind=kind, training=training, scores=scores,
                      caution=CAUTION, trusted=trusted, site=site.slug if site else None)
    card_sha, _ = blobs.put_bytes(card.encode())
    bundle_sha, _ = blobs.put_bytes(bundle({"model.skops": payload,
                                            "model-card.md": card.encode(),
                                            "features.json": features_bytes},
                                           requirements=release_requirements(
                                               (*SCIENCE_DEPENDENCIES, "torch")
                                               if uses_sequences(model)
                                               else SCIENCE_DEPENDENCIES)))
    return {"model": model.name, "kind": kind, "trained_on_site": site,
            "model_sha256": model_sha, "model_digest": model_digest(estimator),
            "card_sha256": card_sha, "spec_sha256": spec_sha, "bundle_sha256": bundle_sha,
            "trusted_types": trusted, "scores": scores}
