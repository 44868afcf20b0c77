"""Starting training runs, re-running them, and approving model releases."""

import json

from django.db import transaction
from django.utils import timezone

from cairn_science.versions import LEARNING_CODE_VERSION
from portal.audit.events import record
from portal.datasets import blobs
from portal.features.models import FeatureSet
from portal.features.services import canonical_digest
from portal.jobs.services import enqueue, jobs_about, state_with_failures
from portal.training.models import ModelRelease, ReleaseState, TrainingRun

#: Kept under this name for the modules that import it from here.
TRAINING_CODE_VERSION = LEARNING_CODE_VERSION


class TrainingRequestError(ValueError):
    """A spec that cannot run; ``errors`` maps a field to messages."""

    def __init__(self, errors):
        self.errors = errors if isinstance(errors, dict) else {"spec": [str(errors)]}
        super().__init__("; ".join(f"{k}: {m}" for k, ms in self.errors.items() for m in ms))


def feature_columns(feature_set):
    with blobs.open_blob(feature_set.sidecar_sha256) as fh:
        columns = json.load(fh)["columns"]
    return [name for name, info in columns.items() if info.get("kind") == "feature"]


def check_spec(data):
    """(feature_set, TrainingSpec) for a spec dict, or TrainingRequestError naming fields."""
    from cairn_science.learning.spec import SpecError, TrainingSpec

    if not isinstance(data, dict):
        raise TrainingRequestError({"spec": ["give a JSON object"]})
    feature_set = None
    if isinstance(data.get("feature_set"), int):
        feature_set = FeatureSet.objects.filter(pk=data["feature_set"]).first()
        if feature_set is None:
            raise TrainingRequestError({"feature_set": [f"no feature set {data['feature_set']}"]})
        if feature_set.state != "done":
            raise TrainingRequestError({"feature_set": [
                f"feature set {feature_set.pk} is not ready yet ({feature_set.state})"]})
    try:
        spec = TrainingSpec.from_dict(
            data, columns=feature_columns(feature_set) if feature_set else None,
            sites=[s.slug for s in feature_set.sites()] if feature_set else None)
    except SpecError as exc:
        raise TrainingRequestError(exc.errors) from None
    return feature_set, spec


def start_run(data, *, user=None, rerun_of=None):
    """Store the spec whole and queue the run's coordinating job."""
    feature_set, spec = check_spec(data)
    stored = spec.as_dict()
    with transaction.atomic():
        run = TrainingRun.objects.create(
            study=feature_set.study, feature_set=feature_set, spec=stored,
            spec_digest=canonical_digest(stored), code_version=TRAINING_CODE_VERSION,
            created_by=user, rerun_of=rerun_of)
        sites = [s.slug for s in feature_set.sites()]
        record("training.requested", actor=user, worker=user is None, target=run,
               study=feature_set.study, site=feature_set.sites().first() if len(sites) == 1
               else None,
               summary=f"training run {run.pk} asked for: {len(spec.models)} model(s) on "
                       f"feature set {feature_set.pk}"
                       + (f" (re-run of {rerun_of.pk})" if rerun_of else ""),
               params={"spec": stored, "spec_digest": run.spec_digest,
                       "code_version": TRAINING_CODE_VERSION},
               inputs=[{"feature_set": feature_set.pk,
                        "table_sha256": feature_set.table_sha256}])
        enqueue("training.run", target=run, study=feature_set.study,
                params={"run": run.pk}, created_by=user)
    return run


def rerun(run, *, user):
    return start_run(run.spec, user=user, rerun_of=run)


def approve(release, *, user):
    with transaction.atomic():
        updated = ModelRelease.objects.filter(pk=release.pk, state=ReleaseState.PENDING).update(
            state=ReleaseState.APPROVED, approved_by=user, approved_at=timezone.now())
        if updated:
            record("release.approved", actor=user, target=release, study=release.run.study,
                   summary=f"release {release.pk} ({release.model}) approved for the sites",
                   params={"model_card_confirmed": True},
                   inputs=[{"release": release.pk, "model_sha256": release.model_sha256,
                            "model_digest": release.model_digest,
                            "card_sha256": release.card_sha256}])
    return bool(updated)


class WithdrawalError(ValueError):
    """A withdrawal that cannot be made (no reason, or a release not approved)."""


REASON_MAX = 2000


def withdraw(release, *, user, reason):
    """Take an approved release back: its files are refused from now on, with ``reason``
    shown to whoever asks for them. Returns the release as stored."""
    reason = (reason or "").strip()
    if not reason:
        raise WithdrawalError("give the reason for the withdrawal: the sites will read it")
    if len(reason) > REASON_MAX:
        raise WithdrawalError(f"keep the reason under {REASON_MAX} characters")
    with transaction.atomic():
        updated = ModelRelease.objects.filter(pk=release.pk, state=ReleaseState.APPROVED).update(
            state=ReleaseState.WITHDRAWN, withdrawn_by=user, withdrawn_at=timezone.now(),
            withdrawal_reason=reason)
        if not updated:
            raise WithdrawalError(f"release {release.pk} is not approved, so it cannot be "
                                  "withdrawn")
        record("release.withdrawn", actor=user, target=release, study=release.run.study,
               summary=f"release {release.pk} ({release.model}) withdrawn: {reason}"[:300],
               params={"reason": reason},
               inputs=[{"release": release.pk, "model_sha256": release.model_sha256,
                        "bundle_sha256": release.bundle_sha256}])
    release.refresh_from_db()
    return release


def jobs_of(run):
    return jobs_about("training.", "run", run.pk)


def status_of(run):
    return state_with_failures(run, jobs_of(run))


def progress_of(run):
    done = run.folds.count()
    return done, run.n_expected


def run_report(run):
    """The run as one JSON-ready object: per model its fold scores, pooled scores with spread,
    and the id of its release (if any)."""
    state, error = status_of(run)
    releases = {r.model: r.pk for r in run.releases.all()}
    models = {}
    for name, r in (run.results.get("models") or {}).items():
        models[name] = {
            "folds": [{"fold": f["fold"], "repeat": f["repeat"],
                       "balanced_accuracy": f["balanced_accuracy"], "accuracy": f["accuracy"],
                       "macro_f1": f["macro_f1"], "kappa": f["kappa"]}
                      for f in r["fold_scores"]],
            "per_fold": r["per_fold"],
            "pooled": {k: r["pooled"][k] for k in ("accuracy", "balanced_accuracy",
                                                   "macro_f1", "kappa")},
            "ci": r["ci"], "chance": r["chance"], "release": releases.get(name),
        }
    return {"run": run.pk, "state": state, "error": error or None,
            "warning": run.warning or None, "models": models,
            "statistics": run.results.get("statistics")}
