"""The two Celery tasks: run one Job, and sweep for jobs that need sending again."""

from celery import shared_task

from portal.jobs import runner, services

MAX_RETRIES = 5


@shared_task(
    name=services.RUN_TASK, bind=True, acks_late=True, reject_on_worker_lost=True,
    max_retries=MAX_RETRIES,
)
def run_job(self, job_id):
    try:
        return runner.run(job_id)
    except runner.TRANSIENT_ERRORS as exc:
        # Back off 2, 4, 8, ... s; after the last retry the sweeper still owns the job.
        raise self.retry(exc=exc, countdown=2 ** (self.request.retries + 1)) from exc


@shared_task(name="cairn.sweep_jobs", acks_late=True, ignore_result=True)
def sweep_jobs():
    return services.sweep()
