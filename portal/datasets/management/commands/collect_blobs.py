import json

from django.core.management.base import BaseCommand

from portal.audit.events import record
from portal.datasets.collect import collect


class Command(BaseCommand):
    help = ("Remove blobs that no dataset version refers to and staging files of uploads that "
            "broke off, once older than a grace period. Safe while uploads are running.")

    def add_arguments(self, parser):
        parser.add_argument("--older-than-s", type=float, default=3600.0)
        parser.add_argument("--dry-run", action="store_true", help="only list what would go")
        parser.add_argument("--json", action="store_true")

    def handle(self, *args, older_than_s, dry_run, **options):
        result = collect(older_than_s=older_than_s, dry_run=dry_run)
        if not dry_run and (result["blobs"] or result["staging"]):
            record("storage.collected", summary=f"removed {len(result['blobs'])} blob(s) and "
                   f"{len(result['staging'])} staging file(s), {result['bytes']} bytes",
                   params={"older_than_s": older_than_s}, outputs=[result])
        if options["json"]:
            self.stdout.write(json.dumps(result, indent=2))
        else:
            verb = "would remove" if dry_run else "removed"
            self.stdout.write(f"{verb} {len(result['blobs'])} blob(s) and "
                              f"{len(result['staging'])} staging file(s): {result['bytes']} bytes")
