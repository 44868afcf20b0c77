import json

from django.core.management.base import BaseCommand
from django.template.defaultfilters import filesizeformat

from portal.audit.events import record
from portal.datasets.collect import collect


class Command(BaseCommand):
    help = ("End resumable uploads that stopped receiving chunks; remove blobs that nothing "
            "refers to, archives of failed uploads, broken-off uploads and chunks, and work "
            "folders of stopped validations, once older than a grace period. Safe while "
            "uploads and validations are running.")

    def add_arguments(self, parser):
        parser.add_argument("--older-than-s", type=float, default=3600.0,
                            help="grace period in seconds (default 3600)")
        parser.add_argument("--dry-run", action="store_true", help="only list what would go")
        parser.add_argument("--json", action="store_true")

    def handle(self, *args, older_than_s, dry_run, **options):
        result = collect(older_than_s=older_than_s, dry_run=dry_run)
        if not dry_run and (result["items"] or result["abandoned_uploads"]):
            record("storage.collected", summary=f"removed {len(result['blobs'])} blob(s) and "
                   f"{len(result['staging'])} staging entries, {result['bytes']} bytes; ended "
                   f"{len(result['abandoned_uploads'])} abandoned upload(s)",
                   params={"older_than_s": older_than_s}, outputs=[result])
        if options["json"]:
            self.stdout.write(json.dumps(result, indent=2))
            return
        verb = "would remove" if dry_run else "removed"
        for upload_id in result["abandoned_uploads"]:
            self.stdout.write(f"{'would end' if dry_run else 'ended'} upload {upload_id} as "
                              "failed: abandoned")
        for item in result["items"]:
            self.stdout.write(f"{verb} {item['kind']} {item['name']} ({item['bytes']} bytes): "
                              f"{item['why']}")
        self.stdout.write(f"{verb} {len(result['blobs'])} blob(s) and "
                          f"{len(result['staging'])} staging entries: {result['bytes']} bytes "
                          f"({filesizeformat(result['bytes'])})")
