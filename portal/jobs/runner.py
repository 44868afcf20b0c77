"""Running one job inside a worker: claim, heartbeat, call the handler, finish or fail."""

import importlib
import logging
import os
import socket
import threading

from django.conf import settings
from django.db import DatabaseError, InterfaceError, OperationalError, close_old_connections
from django.db import connection as db_connection

from portal.jobs import services
from portal.jobs.kinds import get_kind
from portal.jobs.models import Job

log = logging.getLogger(__name__)

#: Errors worth a retry of the whole task (database restarted, connection dropped).
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


class Heartbeat(threading.Thread):
    """Renews the job's lease every few seconds on its own database connection."""

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
                except DatabaseError as exc:  # keep trying; the lease has slack
                    log.warning("heartbeat for job %s failed: %s", self.job_id, exc)
        finally:
            db_connection.close()

    def stop(self):
        self.stopped.set()
        self.join(timeout=10)


def _refresh_connection():
    """Drop a stale database connection between jobs (never inside a transaction)."""
    if not db_connection.in_atomic_block:
        close_old_connections()


def load_handler(kind):
    module_name, func_name = get_kind(kind).handler.split(":")
    return getattr(importlib.import_module(module_name), func_name)


def run(job_id):
    """Run one job if it can be claimed. Returns a short word for the log."""
    _refresh_connection()
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
        services.fail(job_id, token, str(exc))
        return "failed"
    except TRANSIENT_ERRORS:
        _refresh_connection()
        services.release(job_id, token)
        raise
    except Exception as exc:
        log.exception("job %s (%s) failed", job_id, job.kind)
        services.fail(
            job_id, token,
            f"Internal error ({type(exc).__name__}: {exc}). This is a fault in Cairn, not in "
            "your data: please report it to an operator with the job number.",
        )
        return "failed"
    finally:
        beat.stop()
