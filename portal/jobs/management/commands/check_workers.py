import json
import time

from django.core.management.base import BaseCommand, CommandError
from django.db import transaction

from portal.jobs.kinds import WORKER_QUEUES
from portal.jobs.models import Job, JobState
from portal.jobs.services import enqueue


class Command(BaseCommand):
    help = "Queue a short worker check and wait for it: proves workers take jobs and finish them."

    def add_arguments(self, parser):
        parser.add_argument("--timeout-s", type=float, default=60.0)
        parser.add_argument("--json", action="store_true", help="print the result as JSON")

    def handle(self, *args, timeout_s, json: bool, **options):
        with transaction.atomic():
            job = enqueue("probe", params={"steps": 2, "step_s": 0.1})
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            job.refresh_from_db()
            if job.state in (JobState.DONE, JobState.FAILED):
                break
            time.sleep(0.5)
        out = {"job": job.pk, "state": job.state, "error": job.error, "result": job.result}
        self.stdout.write(_dumps(out) if json else self._describe(job))
        if job.state != JobState.DONE:
            raise CommandError(
                f"worker check job {job.pk} is {job.get_state_display()} after {timeout_s:g} s: "
                "is a worker running? Start one with: celery -A portal worker -Q "
                f"{WORKER_QUEUES}"
            )

    def _describe(self, job: Job):
        return (f"worker check job {job.pk}: {job.get_state_display()} on "
                f"{job.result.get('host')} (pid {job.result.get('pid')})")


def _dumps(obj):
    return json.dumps(obj, indent=2, sort_keys=True)
