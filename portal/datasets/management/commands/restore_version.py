import json

from django.core.exceptions import PermissionDenied
from django.core.management.base import BaseCommand, CommandError

from portal.accounts.setup import SetupError, get_site, get_study
from portal.datasets.management.commands.upload_bids import Command as UploadCommand
from portal.datasets.models import DatasetVersion
from portal.datasets.services import UploadError, restore_version


class Command(BaseCommand):
    help = ("Make an earlier dataset version of a site the latest again, as a new version "
            "holding exactly its files (recorded in the audit trail with both manifest "
            "hashes). Restoring a version that lacks files or participants of the latest "
            "version needs --allow-removals.")

    def add_arguments(self, parser):
        parser.add_argument("--site", required=True)
        parser.add_argument("--study", required=True)
        parser.add_argument("--number", type=int, required=True,
                            help="the version number to restore")
        parser.add_argument("--allow-removals", action="store_true",
                            help="go on even if the restore removes files or participants")
        parser.add_argument("--as-user", help="restore as this user (default: an operator)")
        parser.add_argument("--json", action="store_true", help="print one JSON object")

    def handle(self, *args, site, study, number, allow_removals, as_user, **options):
        try:
            site_obj, study_obj = get_site(site), get_study(study)
        except SetupError as exc:
            raise CommandError(str(exc)) from None
        source = DatasetVersion.objects.filter(site=site_obj, study=study_obj,
                                               number=number).first()
        if source is None:
            raise CommandError(f"{site} has no version {number} in {study}")
        user = UploadCommand()._user(as_user)
        try:
            version = restore_version(source, user=user, allow_removals=allow_removals)
        except (UploadError, PermissionDenied) as exc:
            raise CommandError(str(exc)) from None
        out = {"dataset_version": version.pk, "number": version.number,
               "restored_from": number, "manifest_sha256": version.manifest_sha256,
               "diff": {k: len(v) if isinstance(v, list) else v
                        for k, v in version.diff.items()}}
        if options["json"]:
            self.stdout.write(json.dumps(out, indent=2))
        else:
            d = out["diff"]
            self.stdout.write(f"{site} version {version.number} restores version {number}: "
                              f"+{d['added']} −{d['removed']} ~{d['changed']} files against "
                              f"version {version.parent.number}")
