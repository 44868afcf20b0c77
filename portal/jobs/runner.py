"""Running one job inside a worker: claim, heartbeat, call the handler, finish or fail."""

import logging
import os
import socket
import threading

from django.conf import settings
from django.db import InterfaceError, OperationalError, close_old_connections
from django.db import connection as db_connection

from portal.jobs import services
from portal.jobs.kinds import get_kind, resolve
from portal.jobs.models import Job

log = logging.getLogger(__name__)

#: Errors worth a retry of the whole task (database restarted, connection dropped); they are
#: retried ``JOB_TRANSIENT_RETRIES`` times with back-off and never count as a lost worker.
TRANSIENT_ERRORS = (OperationalError, InterfaceError)


def worker_id():
    return f"{socket.gethostname()}:{os.getpid()}"


class JobContext:
    """What a handler gets: the job, a way to report progress, and the finishing transaction."""

    def __init__(self, job, token):
        self.job = job
        self.token = token
        self.finished = False

    @property
    def params(self):
        return self.job.params

    def progress(self, done, total, note=""):
        services.report_progress(self.job.pk, self.token, done, total, note)

    def finish(self):
        """Context manager: write results inside it; the job is marked done on exit."""
        ctx = self

        class _Finish:
            def __enter__(self):
                self._cm = services.finishing(ctx.job.pk, ctx.token)
                return self._cm.__enter__()

            def __exit__(self, *exc):
                result = self._cm.__exit__(*exc)
                if exc[0] is None:
                    ctx.finished = True
                return result

        return _Finish()


def _close_connection():
    """Close this thread's database connection, even a broken one, so the next query opens a
    fresh one."""
    try:
        db_connection.close()
    except Exception as exc:
        log.warning("closing a broken database connection failed: %s", exc)


class Heartbeat(threading.Thread):
    """Renews the job's lease every few seconds on its own database connection.

    A database error must not end the renewals: the thread's connection is closed after any
    error so that the next beat opens a fresh one (Django never does that outside a request,
    and a dropped connection would otherwise fail every later beat until the lease ran out).
    """

    def __init__(self, job_id, token):
        super().__init__(name=f"heartbeat-{job_id}", daemon=True)
        self.job_id = job_id
        self.token = token
        self.stopped = threading.Event()
        self.lost = threading.Event()

    def run(self):
        try:
            while not self.stopped.wait(settings.JOB_HEARTBEAT_S):
                try:
                    if not services.heartbeat(self.job_id, self.token):
                        self.lost.set()
                        return
                except Exception as exc:  # keep trying on a new connection; the lease has slack
                    log.warning("heartbeat for job %s failed: %s", self.job_id, exc)
                    _close_connection()
        finally:
            _close_connection()

    def stop(self):
        self.stopped.set()
        self.join(timeout=10)


class RetryLater(Exception):
    """The job met a database or connection error; the task should run it again after a pause.

    ``resume`` is set when the job could not be given back (the database was still out): the
    next try gives it back first, so the run is counted as a transient retry, not a lost one.
    """

    def __init__(self, cause, resume=None):
        super().__init__(str(cause))
        self.cause = cause
        self.resume = resume


def backoff_s(retries):
    """Pause before the next try after ``retries`` earlier ones: 2, 4, 8, … s, at most 60 s
    (shorter than the sweeper's resend delay, so the retry comes first)."""
    return min(2.0 ** (retries + 1), 60.0, max(1.0, settings.JOB_RESEND_AFTER_S / 2))


def _refresh_connection():
    """Drop a stale database connection between jobs (never inside a transaction)."""
    if not db_connection.in_atomic_block:
        close_old_connections()


def load_handler(kind):
    return resolve(get_kind(kind).handler)


def _describe(exc):
    return f"{type(exc).__name__}: {str(exc).strip()[:200]}"


def run(job_id, resume=None):
    """Run one job if it can be claimed. Returns a short word for the log.

    Raises RetryLater after a database or connection error that left retries to spend.
    """
    _refresh_connection()
    if resume and services.retry_later(job_id, resume["token"], resume["reason"]) == "failed":
        return "failed"
    token = services.claim(job_id, worker_id())
    if token is None:
        return "skipped"
    job = Job.objects.get(pk=job_id)
    beat = Heartbeat(job_id, token)
    beat.start()
    try:
        handler = load_handler(job.kind)
        ctx = JobContext(job, token)
        handler(ctx)
        if not ctx.finished:
            raise RuntimeError(f"handler for {job.kind} returned without finishing the job")
        return "done"
    except services.LeaseLost:
        log.warning("job %s was taken over by another worker; dropping this attempt", job_id)
        return "lost"
    except services.JobError as exc:
        services.fail(job_id, token, str(exc), cause="error")
        return "failed"
    except TRANSIENT_ERRORS as exc:
        beat.stop()
        return _after_transient(job_id, token, exc)
    except Exception as exc:
        log.exception("job %s (%s) failed", job_id, job.kind)
        services.fail(
            job_id, token,
            f"Internal error ({type(exc).__name__}: {exc}). This is a fault in Cairn, not in "
            f"your data: please report it to an operator with the job number ({job_id}).",
            cause="internal",
        )
        return "failed"
    finally:
        beat.stop()


def _after_transient(job_id, token, exc):
    """Give the job back for a retry (or fail it when retries are spent); if the database is
    still out, leave that to the next try through ``RetryLater.resume``."""
    log.warning("job %s met a database or connection error: %s", job_id, exc)
    reason = _describe(exc)
    _refresh_connection()
    try:
        outcome = services.retry_later(job_id, token, reason)
    except TRANSIENT_ERRORS:
        _close_connection()
        raise RetryLater(exc, resume={"token": token, "reason": reason}) from exc
    if outcome == "queued":
        raise RetryLater(exc) from exc
    return outcome
