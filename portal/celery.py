"""The Celery application. Worker processes limit numeric threads before any library loads."""

import os

from celery import Celery
from celery.signals import worker_process_init

from cairn_science.runtime import limit_numeric_threads
from portal.jobs.kinds import BOOKKEEPING_TASKS

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "portal.settings")
# Before numpy/scipy/numba load anywhere in this process (web or worker).
limit_numeric_threads()

app = Celery("cairn")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.conf.update(
    task_acks_late=True,
    task_reject_on_worker_lost=True,
    worker_prefetch_multiplier=1,
    task_default_queue="training",
    task_routes={name: {"queue": "bookkeeping"} for name in BOOKKEEPING_TASKS},
    task_serializer="json",
    accept_content=["json"],
    result_backend=None,
    task_ignore_result=True,
    broker_connection_retry_on_startup=True,
    worker_hijack_root_logger=False,
    beat_schedule_filename=os.environ.get("CAIRN_BEAT_SCHEDULE", "var/beat-schedule"),
)
app.autodiscover_tasks(["portal.jobs"])  # portal/jobs/tasks.py


@worker_process_init.connect
def _limit_threads(**_):
    limit_numeric_threads()


@app.on_after_configure.connect
def _make_broker_folders(sender, **_):
    """The embedded default's broker folders, made before the first message is sent or read."""
    if str(sender.conf.broker_url or "").startswith("filesystem://"):
        from portal.embedded import make_broker_folders

        make_broker_folders(sender.conf.broker_transport_options or {})


@app.on_after_configure.connect
def _queue_order(sender, **_):
    """A worker consuming several queues asks Redis for them in the order given to ``-Q``
    (kombu's "priority" cycle: BRPOP returns from the first non-empty list), instead of the
    default round-robin that moves the last queue served to the back. Ignored by the
    filesystem broker of the embedded default, which takes turns between its queues."""
    sender.conf.broker_transport_options = {
        **(sender.conf.broker_transport_options or {}), "queue_order_strategy": "priority"}


@app.on_after_configure.connect
def _schedule_sweeper(sender, **_):
    """The periodic bookkeeping tasks. Each expires after its own period: a copy still queued
    when the next is due is dropped unrun, so they cannot pile up behind long work."""
    from django.conf import settings

    def every(seconds, task, name):
        sender.add_periodic_task(seconds, sender.signature(task), name=name, expires=seconds)

    every(settings.JOB_SWEEP_EVERY_S, "cairn.sweep_jobs", "sweep jobs")
    every(min(3600.0, settings.UPLOAD_ABANDONED_AFTER_S / 4), "cairn.expire_uploads",
          "end abandoned uploads")
    every(max(1.0, settings.AUDIT_SEAL_EVERY_S), "cairn.audit_seal", "link audit events")
    every(settings.AUDIT_ANCHOR_EVERY_S, "cairn.audit_anchor", "anchor audit chain")
    every(settings.AUDIT_VERIFY_EVERY_S, "cairn.audit_verify", "verify audit chain")
