import json
import time

from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand, CommandError

from portal.accounts.setup import SetupError, get_site, get_study
from portal.datasets.models import Upload, UploadMode, UploadState
from portal.datasets.services import UploadError, submit_path


class Command(BaseCommand):
    help = ("Submit a BIDS dataset (a folder, .zip or .tar(.gz)) for a site, through the same "
            "path as the web upload. Exit status 0 when accepted, 1 when rejected, 2 when its "
            "validation failed (the output says the next step).")

    def add_arguments(self, parser):
        parser.add_argument("path")
        parser.add_argument("--site", required=True)
        parser.add_argument("--study", required=True)
        parser.add_argument("--mode", choices=UploadMode.values, default=UploadMode.SNAPSHOT)
        parser.add_argument("--as-user", help="submit as this user (default: an operator)")
        parser.add_argument("--wait", action="store_true", help="return when validation ended")
        parser.add_argument("--timeout-s", type=float, default=3600.0)
        parser.add_argument("--json", action="store_true", help="print one JSON object")

    def handle(self, *args, path, site, study, mode, as_user, wait, timeout_s, **options):
        try:
            site_obj, study_obj = get_site(site), get_study(study)
        except SetupError as exc:
            raise CommandError(str(exc)) from None
        user = self._user(as_user)
        try:
            upload = submit_path(path, site=site_obj, study=study_obj, user=user, mode=mode,
                                   via="command")
        except UploadError as exc:
            raise CommandError(str(exc)) from None
        if wait:
            deadline = time.monotonic() + timeout_s
            while upload.state in (UploadState.QUEUED, UploadState.VALIDATING):
                if time.monotonic() > deadline:
                    raise CommandError(f"upload {upload.pk} still {upload.state} after "
                                       f"{timeout_s:g} s; is a worker running?")
                time.sleep(0.5)
                upload.refresh_from_db()
        self._report(upload, options["json"])
        if upload.state == UploadState.REJECTED:
            raise SystemExit(1)
        if upload.state == UploadState.FAILED:
            raise SystemExit(2)

    def _user(self, username):
        User = get_user_model()
        if username:
            try:
                return User.objects.get(username=username)
            except User.DoesNotExist:
                raise CommandError(f"unknown user {username!r}") from None
        user = User.objects.filter(is_superuser=True, is_active=True).order_by("pk").first()
        if user is None:
            raise CommandError("no operator account; create one with manage.py add_member NAME "
                               "--role operator, or pass --as-user")
        return user

    def _report(self, upload: Upload, as_json):
        version = getattr(upload, "version", None) if upload.state == UploadState.ACCEPTED else None
        out = {
            "upload": upload.pk,
            "state": upload.state,
            "dataset_version": version.pk if version else None,
            "errors": upload.errors,
            "warnings": upload.warnings,
            "failure": upload.failure or None,
            "next_step": upload.next_step or None,
        }
        if as_json:
            self.stdout.write(json.dumps(out, indent=2))
            return
        self.stdout.write(f"upload {upload.pk}: {upload.get_state_display()}")
        if upload.state == UploadState.FAILED:
            self.stdout.write(f"  failure   {upload.failure}")
            self.stdout.write(f"  next step {upload.next_step}")
        for problem in upload.errors:
            self.stdout.write(f"  error   {_where(problem)}: {problem['message']}")
        for problem in upload.warnings:
            self.stdout.write(f"  warning {_where(problem)}: {problem['message']}")


def _where(problem):
    where = problem["path"]
    if problem.get("line"):
        where += f":{problem['line']}"
    if problem.get("field"):
        where += f" [{problem['field']}]"
    return where
