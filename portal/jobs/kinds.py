"""The kinds of background work, where each runs, and which function does it.

The web process reads this table without importing any handler, so it never loads the
scientific libraries; a worker imports a handler only when it runs a job of that kind.
"""

import importlib
from dataclasses import dataclass


@dataclass(frozen=True)
class JobKind:
    """``on_failure`` (optional, "module:function") is called as ``f(job, cause)`` inside the
    transaction that marks a job of this kind failed, so the object it worked on can end in a
    failed state too; ``cause`` is one of FAILURE_CAUSES."""

    name: str
    label: str
    handler: str  # dotted path "module:function"
    queue: str = "training"
    on_failure: str = ""


#: Why a job ended failed: a JobError from its handler ("error"), any other exception
#: ("internal"), its workers stopped too often ("lost"), or the database kept failing
#: ("transient").
FAILURE_CAUSES = ("error", "internal", "lost", "transient")


KINDS = {
    kind.name: kind
    for kind in (
        JobKind("probe", "worker check", "portal.jobs.probe:run_probe", queue="intake"),
        JobKind(
            "upload.validate", "validate and index an upload",
            "portal.datasets.jobs:validate_upload", queue="intake",
            on_failure="portal.datasets.services:validation_failed",
        ),
        JobKind("qc.version", "quality checks of a dataset version",
                "portal.quality.jobs:run_version", queue="quality"),
        JobKind("qc.recording", "quality checks of a recording",
                "portal.quality.jobs:run_recording", queue="quality"),
        JobKind("features.set", "feature set: plan the recordings",
                "portal.features.jobs:run_set", queue="training"),
        JobKind("features.recording", "features of a recording",
                "portal.features.jobs:run_recording", queue="training"),
        JobKind("features.combine", "feature set: join the table",
                "portal.features.jobs:run_combine", queue="training"),
        JobKind("training.run", "training run: check and plan the folds",
                "portal.training.jobs:run_run", queue="training"),
        JobKind("training.fold", "training run: one model on one fold",
                "portal.training.jobs:run_fold", queue="training"),
        JobKind("training.finish", "training run: statistics and releases",
                "portal.training.jobs:run_finish", queue="training"),
        JobKind("audit.reproduce", "compute a stored result again from its record",
                "portal.lineage.jobs:run_reproduce", queue="training"),
    )
}

#: The queues, in the order a worker that takes them all serves them. Under Redis with
#: ``queue_order_strategy="priority"`` (portal.celery) a worker asks for its queues' next
#: message in this order every time it has a free slot, so it takes a message from a later
#: queue only when every earlier one is empty:
#:
#: * intake: what a person waits for at the screen: validating an upload, the worker check;
#: * quality: the checks of a new dataset version (planned, then one job per recording);
#: * bookkeeping: Celery's periodic tasks (job sweeps, audit sealing, anchoring and
#:   verification, ending abandoned uploads); short, and each expires after its own period
#:   so they never pile up, so taking them before the next training fold costs little and
#:   keeps the audit chain sealed during long runs;
#: * training: features, training runs and their folds, reproductions: long, and nobody's
#:   screen waits on one fold.
QUEUES = ("intake", "quality", "bookkeeping", "training")

#: The ``-Q`` argument of the default worker command (all queues, in priority order).
WORKER_QUEUES = ",".join(QUEUES)

#: Celery's periodic tasks, all on the bookkeeping queue.
BOOKKEEPING_TASKS = ("cairn.sweep_jobs", "cairn.expire_uploads", "cairn.audit_seal",
                     "cairn.audit_anchor", "cairn.audit_verify")


def get_kind(name):
    try:
        return KINDS[name]
    except KeyError:
        raise ValueError(
            f"unknown job kind {name!r}; known kinds: {', '.join(sorted(KINDS))}"
        ) from None


def resolve(path):
    """The function a dotted "module:function" path names (imported only when asked for)."""
    module_name, func_name = path.split(":")
    return getattr(importlib.import_module(module_name), func_name)
