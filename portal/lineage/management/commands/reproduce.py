import json

from django.core.management.base import BaseCommand, CommandError

from portal.commands import wait_until_settled
from portal.lineage import reproduce
from portal.lineage.models import Reproduction


class Command(BaseCommand):
    help = ("Compute a stored feature set (features:ID) or quality result (qc:ID) again from "
            "its record in a worker, and say whether the new result's sha256 equals the "
            "stored one. Exit status 1 when it differs.")

    def add_arguments(self, parser):
        parser.add_argument("subject", metavar="KIND:ID", help="features:ID or qc:ID")
        parser.add_argument("--wait", action="store_true", help="wait for the worker")
        parser.add_argument("--timeout-s", type=float, default=3600.0)
        parser.add_argument("--json", action="store_true", help="print one JSON object")

    def handle(self, *args, subject, wait, timeout_s, **options):
        try:
            kind, obj = reproduce.subject_object(subject)
            item = reproduce.start(kind, obj, user=None)
        except ValueError as exc:
            raise CommandError(str(exc)) from None
        if wait:
            def status():
                item.refresh_from_db()
                if item.error:
                    return "failed", item.error
                return ("done" if item.matches is not None else "running"), ""

            wait_until_settled(status, timeout_s=timeout_s, what=f"reproduction {item.pk}")
        item = Reproduction.objects.get(pk=item.pk)
        out = {"reproduction": item.pk, "subject": item.subject,
               "original_sha256": item.original_sha256, "new_sha256": item.new_sha256 or None,
               "matches": item.matches, "error": item.error or None, "details": item.details}
        if options["json"]:
            self.stdout.write(json.dumps(out, sort_keys=True))
        else:
            state = {True: "same result", False: "DIFFERENT result", None: "queued"}[item.matches]
            self.stdout.write(f"reproduction {item.pk} of {item.subject}: {state}")
        if item.error:
            raise CommandError(f"computing {subject} again failed: {item.error}")
        if item.matches is False:
            raise SystemExit(1)
