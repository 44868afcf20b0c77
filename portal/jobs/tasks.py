"""The two Celery tasks: run one Job, and sweep for jobs that need sending again."""

from celery import shared_task
from django.conf import settings

from portal.jobs import runner, services


@shared_task(name=services.RUN_TASK, bind=True, acks_late=True, reject_on_worker_lost=True)
def run_job(self, job_id, resume=None):
    """Run one job; after a database or connection error, try again with back-off. The Job
    row counts the retries (``JOB_TRANSIENT_RETRIES``); if Celery's own count runs out first,
    the sweeper still owns the job."""
    try:
        return runner.run(job_id, resume=resume)
    except runner.RetryLater as exc:
        raise self.retry(args=[job_id], kwargs={"resume": exc.resume}, exc=exc.cause,
                         countdown=runner.backoff_s(self.request.retries),
                         max_retries=settings.JOB_TRANSIENT_RETRIES) from exc
    except runner.TRANSIENT_ERRORS as exc:  # before the job was claimed (or given back)
        raise self.retry(exc=exc, countdown=runner.backoff_s(self.request.retries),
                         max_retries=settings.JOB_TRANSIENT_RETRIES) from exc


@shared_task(name="cairn.sweep_jobs", acks_late=True, ignore_result=True)
def sweep_jobs():
    return services.sweep()


@shared_task(name="cairn.expire_uploads", ignore_result=True)
def expire_uploads():
    """End resumable uploads that stopped sending (and free their staged bytes)."""
    from portal.datasets.services import expire_abandoned

    return len(expire_abandoned())


@shared_task(name="cairn.audit_seal", ignore_result=True)
def audit_seal():
    """Link events committed since the last seal (after-commit sealing is batched)."""
    from portal.audit.chain import seal_pending

    return seal_pending()


@shared_task(name="cairn.audit_anchor", ignore_result=True)
def audit_anchor():
    """Seal events whose after-commit sealing did not run, and anchor the chain's head."""
    from portal.audit.chain import write_anchor

    return write_anchor()


@shared_task(name="cairn.audit_verify", ignore_result=True)
def audit_verify():
    """Verify the whole chain, anchor it when whole, and record the outcome as an event."""
    from portal.audit.chain import verify, write_anchor
    from portal.audit.events import record

    result = verify()
    if result.ok:
        write_anchor()
    record("audit.verified", worker=True,
           summary=("chain whole: " + f"{result.links} links") if result.ok
           else f"chain BROKEN: {result.problem['words']}",
           params={"ok": result.ok, "links": result.links, "head_seq": result.head_seq,
                   "problem": result.problem})
    return result.ok
