"""The Celery application. Worker processes limit numeric threads before any library loads."""

import os

from celery import Celery
from celery.signals import worker_process_init

from cairn_science.runtime import limit_numeric_threads

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "portal.settings")
# Before numpy/scipy/numba load anywhere in this process (web or worker).
limit_numeric_threads()

app = Celery("cairn")
app.config_from_object("django.conf:settings", namespace="CELERY")
app.conf.update(
    task_acks_late=True,
    task_reject_on_worker_lost=True,
    worker_prefetch_multiplier=1,
    task_default_queue="compute",
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
def _schedule_sweeper(sender, **_):
    from django.conf import settings

    sender.add_periodic_task(
        settings.JOB_SWEEP_EVERY_S, sender.signature("cairn.sweep_jobs"), name="sweep jobs"
    )
    sender.add_periodic_task(min(3600.0, settings.UPLOAD_ABANDONED_AFTER_S / 4),
                             sender.signature("cairn.expire_uploads"),
                             name="end abandoned uploads")
    sender.add_periodic_task(max(1.0, settings.AUDIT_SEAL_EVERY_S),
                             sender.signature("cairn.audit_seal"), name="link audit events")
    sender.add_periodic_task(settings.AUDIT_ANCHOR_EVERY_S,
                             sender.signature("cairn.audit_anchor"), name="anchor audit chain")
    sender.add_periodic_task(settings.AUDIT_VERIFY_EVERY_S,
                             sender.signature("cairn.audit_verify"), name="verify audit chain")
