from pathlib import Path

from django.core.management.base import BaseCommand, CommandError

from portal.lineage.prov import provenance_json, resolve


class Command(BaseCommand):
    help = ("Write the lineage of an object (training:ID, release:ID, features:ID or "
            "version:ID) as W3C PROV-JSON.")

    def add_arguments(self, parser):
        parser.add_argument("ref", metavar="OBJECT_REF")
        parser.add_argument("--out", required=True, metavar="FILE.json")

    def handle(self, *args, ref, out, **options):
        try:
            obj = resolve(ref)
        except ValueError as exc:
            raise CommandError(str(exc)) from None
        text = provenance_json(obj)
        Path(out).write_text(text, encoding="utf-8")
        self.stdout.write(f"wrote the provenance of {ref} to {out}")
