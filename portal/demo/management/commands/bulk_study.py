import json
import time

from django.core.management.base import BaseCommand, CommandError

from portal.demo.bulk import PASSWORD, BulkStudyError, make_study


class Command(BaseCommand):
    help = ("Write a large invented study straight into the database (bulk inserts, no jobs, "
            "no audit events) for load tests of the pages, and print its counts as JSON. "
            f"Every generated person logs in with the password {PASSWORD!r}.")

    def add_arguments(self, parser):
        parser.add_argument("--recordings", type=int, required=True,
                            help="how many recordings (at least two per site)")
        parser.add_argument("--slug", default="bulk",
                            help="the study's slug; sites and people are named after it")
        parser.add_argument("--sites", type=int, default=3, help="how many sites")
        parser.add_argument("--seed", type=int, default=0,
                            help="the same seed gives the same files, hashes and numbers")

    def handle(self, *args, recordings, slug, sites, seed, **options):
        started = time.perf_counter()
        try:
            made = make_study(recordings, n_sites=sites, slug=slug, seed=seed)
        except BulkStudyError as exc:
            raise CommandError(str(exc).replace("n_recordings:", "--recordings:")
                               .replace("n_sites:", "--sites:")) from None
        summary = {"study": made["study"].slug, "sites": [s.slug for s in made["sites"]],
                   "lead": made["users"]["lead"].username, "password": PASSWORD,
                   "counts": made["counts"],
                   "seconds": round(time.perf_counter() - started, 2)}
        self.stdout.write(json.dumps(summary, indent=2))
