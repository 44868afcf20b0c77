"""Asking for background work, claiming it, renewing leases, finishing, and sweeping.

A job is written in the transaction that asks for it and its message is sent on commit. A
worker claims a job by a conditional UPDATE that also starts a lease; while it works it renews
the lease. Anything that finds a job whose lease ran out, or a queued job whose message seems
lost, sends it again: the broker is never trusted to redeliver.
"""

import contextlib
import logging
import uuid
from datetime import timedelta

from django.conf import settings
from django.db import transaction
from django.db.models import F, Q
from django.utils import timezone

from portal.audit.events import describe, record
from portal.jobs.kinds import FAILURE_CAUSES, KINDS, get_kind, resolve
from portal.jobs.models import Job, JobState

log = logging.getLogger(__name__)

RUN_TASK = "cairn.run_job"


class LeaseLost(RuntimeError):
    """This worker no longer holds the job (its lease ran out and another worker took it)."""


class JobError(Exception):
    """A failure the person who asked for the job can act on; the message is shown to them."""


def enqueue(kind, *, target=None, params=None, site=None, study=None, created_by=None):
    """Write a Job and send its message when the surrounding transaction commits."""
    get_kind(kind)
    target_type, target_id = describe(target)
    with transaction.atomic():
        job = Job.objects.create(
            kind=kind, target_type=target_type, target_id=target_id, params=params or {},
            site=site, study=study, created_by=created_by,
        )
        record(
            "job.queued", actor=created_by, target=job, site=site, study=study,
            summary=f"{job.label} queued",
            params={"kind": kind, "target": [target_type, target_id]},
        )
        job_id = job.pk
        transaction.on_commit(lambda: send(job_id))
    return job


def send(job_id):
    """Publish the message that wakes a worker for this job. A broker failure is only logged:
    the job stays queued and the sweeper sends it again."""
    from portal.celery import app

    job = Job.objects.only("kind").get(pk=job_id)
    queue = get_kind(job.kind).queue
    try:
        app.send_task(RUN_TASK, args=[job_id], queue=queue, retry=False)
    except Exception as exc:  # broker down: the sweeper will try again
        log.warning("could not send job %s to the broker (%s); the sweeper will retry", job_id, exc)
        return False
    Job.objects.filter(pk=job_id).update(sent_at=timezone.now(), sends=F("sends") + 1)
    return True


def _lease_end(now=None):
    return (now or timezone.now()) + timedelta(seconds=settings.JOB_LEASE_S)


def claim(job_id, worker_id):
    """Take the job for this worker if it is waiting, or running under an expired lease.

    Returns the claim token, or None if the job is finished, failed or held by a live worker.
    """
    now = timezone.now()
    token = uuid.uuid4().hex
    claimable = Q(state=JobState.QUEUED) | Q(state=JobState.RUNNING, lease_expires_at__lt=now)
    taken = (
        Job.objects.filter(claimable, pk=job_id, attempts__lt=settings.JOB_MAX_ATTEMPTS)
        .update(
            state=JobState.RUNNING, attempts=F("attempts") + 1, claim=token, worker_id=worker_id,
            started_at=now, heartbeat_at=now, lease_expires_at=_lease_end(now), error="",
        )
    )
    if taken:
        return token
    _fail_if_exhausted(job_id, now)
    return None


def _ended_failed(job, cause):
    """Record that ``job`` failed and let its kind's failure hook fail the object it worked on,
    inside the caller's transaction. A broken hook is logged; it never keeps the job running."""
    if cause not in FAILURE_CAUSES:
        raise ValueError(f"unknown failure cause {cause!r}; one of {', '.join(FAILURE_CAUSES)}")
    record("job.failed", target=job, site=job.site, study=job.study, worker=True,
           summary=job.error[:300], params={"cause": cause, "attempts": job.attempts,
                                             "transient_failures": job.transient_failures})
    kind = KINDS.get(job.kind)
    if kind is None or not kind.on_failure:
        return
    try:
        with transaction.atomic():
            resolve(kind.on_failure)(job, cause)
    except Exception:
        log.exception("failure hook %s for job %s raised", kind.on_failure, job.pk)


def _fail_if_exhausted(job_id, now):
    exhausted = Job.objects.filter(
        Q(state=JobState.QUEUED) | Q(state=JobState.RUNNING, lease_expires_at__lt=now),
        pk=job_id, attempts__gte=settings.JOB_MAX_ATTEMPTS,
    )
    message = (
        f"Stopped after {settings.JOB_MAX_ATTEMPTS} attempts: the worker running it stopped "
        "each time (crash, out of memory or restart). Ask an operator to check the worker logs "
        f"(job {job_id})."
    )
    with transaction.atomic():
        if exhausted.update(state=JobState.FAILED, error=message, finished_at=now, claim="",
                            lease_expires_at=None):
            _ended_failed(Job.objects.get(pk=job_id), "lost")


def heartbeat(job_id, token):
    """Renew the lease; False if this worker no longer holds the job."""
    now = timezone.now()
    return bool(
        Job.objects.filter(pk=job_id, claim=token, state=JobState.RUNNING).update(
            heartbeat_at=now, lease_expires_at=_lease_end(now)
        )
    )


def report_progress(job_id, token, done, total, note=""):
    now = timezone.now()
    updated = Job.objects.filter(pk=job_id, claim=token, state=JobState.RUNNING).update(
        progress_done=done, progress_total=total, progress_note=note[:200],
        heartbeat_at=now, lease_expires_at=_lease_end(now),
    )
    if not updated:
        raise LeaseLost(f"job {job_id} is no longer held by this worker")


@contextlib.contextmanager
def finishing(job_id, token):
    """Write a job's results and mark it done in one transaction, only if this worker holds it.

    This is what makes tasks idempotent: of two workers that both ran a job, only the holder
    of the current claim can write results; the other's transaction is refused.
    """
    with transaction.atomic():
        job = Job.objects.select_for_update().get(pk=job_id)
        if job.claim != token or job.state != JobState.RUNNING:
            raise LeaseLost(f"job {job_id} is no longer held by this worker")
        yield job
        now = timezone.now()
        job.state = JobState.DONE
        job.finished_at = now
        job.lease_expires_at = None
        job.claim = ""
        if job.progress_total:
            job.progress_done = job.progress_total
        job.save()
        record(
            "job.finished", target=job, site=job.site, study=job.study, worker=True,
            summary=f"{job.label} finished", params={"attempts": job.attempts},
        )


def fail(job_id, token, message, *, cause="error"):
    """Mark the job failed with a message a person can act on; ``cause`` is one of
    ``portal.jobs.kinds.FAILURE_CAUSES``."""
    now = timezone.now()
    with transaction.atomic():
        updated = Job.objects.filter(pk=job_id, claim=token, state=JobState.RUNNING).update(
            state=JobState.FAILED, error=message, finished_at=now, lease_expires_at=None, claim=""
        )
        if updated:
            _ended_failed(Job.objects.get(pk=job_id), cause)
    return bool(updated)


def retry_later(job_id, token, reason):
    """After a database or connection error: give the job back to the queue without counting
    the attempt, or fail it once ``JOB_TRANSIENT_RETRIES`` retries were spent.

    Returns "queued", "failed", or "lost" when this worker no longer holds the job.
    """
    now = timezone.now()
    with transaction.atomic():
        job = Job.objects.select_for_update().filter(
            pk=job_id, claim=token, state=JobState.RUNNING).first()
        if job is None:
            return "lost"
        if job.transient_failures >= settings.JOB_TRANSIENT_RETRIES:
            job.transient_failures += 1
            job.state, job.finished_at, job.lease_expires_at, job.claim = (
                JobState.FAILED, now, None, "")
            job.error = (
                f"Stopped after {job.transient_failures} database or connection errors (the "
                f"last: {reason}). The worker kept running but could not reach the database "
                "reliably. Ask an operator to check the database and its connections, then run "
                f"it again (job {job.pk})."
            )
            job.save()
            _ended_failed(job, "transient")
            return "failed"
        job.transient_failures += 1
        job.attempts = max(0, job.attempts - 1)  # a passing database error is no lost worker
        job.state, job.claim, job.lease_expires_at, job.sent_at = JobState.QUEUED, "", None, now
        job.save()
        record("job.retrying", target=job, site=job.site, study=job.study, worker=True,
               summary=f"database or connection error; retry {job.transient_failures} of "
               f"{settings.JOB_TRANSIENT_RETRIES}", params={"reason": reason[:300],
                                                            "retry": job.transient_failures})
    return "queued"


def sweep(now=None):
    """Send again every job whose worker died (lease expired) or whose message was lost.

    Returns the ids sent again. Safe to run from several places at once: a job sent twice is
    claimed once.
    """
    now = now or timezone.now()
    resent = []
    expired = Job.objects.filter(state=JobState.RUNNING, lease_expires_at__lt=now)
    for job in expired.only("pk", "attempts"):
        if job.attempts >= settings.JOB_MAX_ATTEMPTS:
            _fail_if_exhausted(job.pk, now)
            continue
        back = Job.objects.filter(
            pk=job.pk, state=JobState.RUNNING, lease_expires_at__lt=now
        ).update(state=JobState.QUEUED, claim="", lease_expires_at=None)
        if back:
            record(
                "job.resent", target=job, worker=True, summary="worker stopped; job sent again",
                params={"reason": "lease expired", "attempts": job.attempts},
            )
            resent.append(job.pk)
    stale = now - timedelta(seconds=settings.JOB_RESEND_AFTER_S)
    lost = Job.objects.filter(state=JobState.QUEUED).filter(
        Q(sent_at__lt=stale) | Q(sent_at__isnull=True, created_at__lt=stale)
    )
    for job in lost.only("pk"):
        if job.pk not in resent:
            record(
                "job.resent", target=job, worker=True, summary="message presumed lost; sent again",
                params={"reason": "not picked up"},
            )
            resent.append(job.pk)
    for job_id in resent:
        send(job_id)
    return resent


def jobs_about(prefix, key, value):
    """Jobs whose kind starts with ``prefix`` and whose params hold ``key`` = ``value`` (the
    jobs of one feature set or training run)."""
    return Job.objects.filter(kind__startswith=prefix, **{f"params__{key}": value})


def state_with_failures(obj, jobs):
    """(state, error words) of an object computed by several jobs: "done" when it says so,
    "failed" with the newest failed job's message, else its own state."""
    if obj.state == "done":
        return "done", ""
    failed = jobs.filter(state=JobState.FAILED).order_by("-id").first()
    if failed is not None:
        return "failed", failed.error
    return obj.state, obj.error


def work_status(*, state, error, done, total, unit, jobs, status_url):
    """The context of ``jobs/_work_status.html``: an object's state, how far its work is
    (``done`` of ``total`` ``unit``), its jobs, and the endpoint htmx polls until the state
    is final."""
    final = state in ("done", "failed")
    return {"state": state, "error": error, "done": done, "total": total, "unit": unit,
            "percent": round(100 * done / total) if total else (100 if final else 0),
            "final": final, "jobs": jobs, "status_url": status_url}
