"""Asking for a stored result to be computed again from its record, and what it showed.

Feature sets and quality results are recomputed by the ``audit.reproduce`` job (the kind
keeps the name it had when this lived in the audit app, so stored jobs still resolve); a
training run is repeated as a new run from its stored spec, and
:func:`portal.training.fingerprint.training_fingerprint` compares the two runs' fold scores
and model digests.
"""

from django.db import transaction

from portal.audit.events import canonical_sha256, record
from portal.jobs.models import Job
from portal.jobs.services import enqueue
from portal.lineage.models import Reproduction

SUBJECTS = {"features": "features.FeatureSet", "qc": "quality.QCRun"}


def subject_object(subject):
    from django.apps import apps

    kind, _, ident = subject.partition(":")
    if kind not in SUBJECTS or not ident.isdigit():
        raise ValueError(f"{subject!r}: give KIND:ID with KIND one of {', '.join(SUBJECTS)}")
    obj = apps.get_model(SUBJECTS[kind]).objects.filter(pk=int(ident)).first()
    if obj is None:
        raise ValueError(f"{subject!r}: no such object; the ids are on the feature set and "
                         "quality pages")
    return kind, obj


def original_sha256(kind, obj):
    if kind == "features":
        return obj.table_sha256
    return canonical_sha256(obj.result)


def start(kind, obj, *, user):
    """A new Reproduction of a feature set (``features``) or quality result (``qc``) and the
    job that computes it."""
    if kind == "features" and not obj.table_sha256:
        raise ValueError(f"feature set {obj.pk} has no table yet; wait until it is done")
    site = getattr(obj, "site", None)
    study = getattr(obj, "study", None)
    with transaction.atomic():
        reproduction = Reproduction.objects.create(
            subject=f"{kind}:{obj.pk}", original_sha256=original_sha256(kind, obj),
            created_by=user)
        record("reproduction.started", actor=user, target=reproduction, site=site,
               study=study, summary=f"{kind} {obj.pk} to be computed again from its record",
               params={"subject": reproduction.subject},
               inputs=[{"subject": reproduction.subject,
                        "sha256": reproduction.original_sha256}])
        enqueue("audit.reproduce", target=reproduction, site=site, study=study,
                created_by=user)
    return reproduction


def latest(kind, obj):
    return Reproduction.objects.filter(subject=f"{kind}:{obj.pk}").first()


def page_context(kind, obj, *, may_start):
    """What an object's page shows of its latest reproduction (and its job)."""
    reproduction = latest(kind, obj) if obj is not None else None
    job = None
    if reproduction is not None:
        job = Job.objects.filter(target_type=Reproduction._meta.label_lower,
                                 target_id=str(reproduction.pk)).order_by("-id").first()
    return {"reproduction": reproduction, "reproduction_job": job,
            "reproduce_kind": kind, "reproduce_object": obj, "may_reproduce": may_start}
