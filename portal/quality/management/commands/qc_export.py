import time
from pathlib import Path

from django.core.management.base import BaseCommand, CommandError

from portal.datasets.models import DatasetVersion
from portal.jobs.models import Job, JobState
from portal.quality.derivatives import write_derivative
from portal.quality.services import progress


class Command(BaseCommand):
    help = ("Write the quality checks of a dataset version (its latest round) as a BIDS "
            "derivative dataset: channels.tsv with status per recording and *_qc.json.")

    def add_arguments(self, parser):
        parser.add_argument("--dataset-version", type=int, required=True, dest="version_id")
        parser.add_argument("--out", required=True, help="folder to create")
        parser.add_argument("--wait", action="store_true",
                            help="wait until every recording of the round is checked")
        parser.add_argument("--timeout-s", type=float, default=3600.0)

    def handle(self, *args, version_id, out, wait, timeout_s, **options):
        version = DatasetVersion.objects.filter(pk=version_id).first()
        if version is None:
            raise CommandError(f"no dataset version {version_id}")
        qc_round = version.qc_rounds.first()
        if qc_round is None:
            raise CommandError(f"dataset version {version_id} has no quality checks yet; they "
                               "start when a version is accepted (is a worker running?)")
        out = Path(out)
        if out.exists():
            raise CommandError(f"{out} already exists; give a new folder")
        deadline = time.monotonic() + timeout_s
        done, total = progress(qc_round)
        while wait and done < total:
            failed = Job.objects.filter(kind__startswith="qc.", state=JobState.FAILED,
                                        params__round=qc_round.pk).first()
            if failed is not None:
                raise CommandError(f"a quality job failed (job {failed.pk}): {failed.error}")
            if time.monotonic() > deadline:
                raise CommandError(f"{done} of {total} recordings checked after {timeout_s:g} "
                                   "s; is a worker running?")
            time.sleep(1)
            done, total = progress(qc_round)
        if done == 0:
            raise CommandError(f"no recording of version {version_id} has been checked yet; "
                               "use --wait")
        written = write_derivative(qc_round, out)
        self.stdout.write(f"wrote {written} of {total} recordings' quality checks to {out}")
        if written < total:
            self.stdout.write(f"({total - written} not checked yet: run again with --wait)")
