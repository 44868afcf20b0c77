import json
import time

from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand, CommandError

from portal.accounts.setup import SetupError, get_site, get_study
from portal.datasets.models import Upload, UploadMode, UploadState
from portal.datasets.services import (
    UploadError,
    removal_words,
    submit_path,
    warning_report,
)


class Command(BaseCommand):
    help = ("Submit a BIDS dataset (a folder, .zip or .tar(.gz)) for a site, through the same "
            "path as the web upload. A snapshot (the whole dataset) that would remove files or "
            "participants of the latest version waits for a confirmation unless "
            "--allow-removals is given. Exit status 0 when accepted, 1 when rejected, 2 when "
            "its validation failed (the output says the next step), 3 when it waits for the "
            "confirmation of removals (nothing stored changed).")

    def add_arguments(self, parser):
        parser.add_argument("path")
        parser.add_argument("--site", required=True)
        parser.add_argument("--study", required=True)
        parser.add_argument("--mode", choices=UploadMode.values, default=UploadMode.SNAPSHOT,
                            help="snapshot: the whole dataset (replaces the latest version); "
                                 "addition: added to the latest version, removing nothing")
        parser.add_argument("--allow-removals", action="store_true",
                            help="let a snapshot remove files and participants the latest "
                                 "version holds (without it such an upload waits, state held)")
        parser.add_argument("--as-user", help="submit as this user (default: an operator)")
        parser.add_argument("--wait", action="store_true", help="return when validation ended")
        parser.add_argument("--timeout-s", type=float, default=3600.0)
        parser.add_argument("--json", action="store_true", help="print one JSON object")

    def handle(self, *args, path, site, study, mode, as_user, wait, timeout_s, allow_removals,
               **options):
        try:
            site_obj, study_obj = get_site(site), get_study(study)
        except SetupError as exc:
            raise CommandError(str(exc)) from None
        user = self._user(as_user)
        try:
            upload = submit_path(path, site=site_obj, study=study_obj, user=user, mode=mode,
                                 via="command", allow_removals=allow_removals)
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
        if upload.state == UploadState.HELD:
            raise SystemExit(3)

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
        if upload.state == UploadState.HELD:
            removals = upload.pending_removals
            out["needs_confirmation"] = {
                "message": f"this snapshot would remove {removal_words(removals)}; nothing "
                           "has changed. Send it again with --allow-removals to go on, or "
                           "with --mode addition to add without removing",
                "files": removals["files"], "first_paths": removals["first_paths"],
                "participants": removals["participants"],
                "dataset_version": removals["parent"],
            }
        if as_json:
            self.stdout.write(json.dumps(out, indent=2))
            return
        self.stdout.write(f"upload {upload.pk}: {upload.get_state_display()}")
        if upload.state == UploadState.FAILED:
            self.stdout.write(f"  failure   {upload.failure}")
            self.stdout.write(f"  next step {upload.next_step}")
        if upload.state == UploadState.HELD:
            held = out["needs_confirmation"]
            self.stdout.write(f"  needs confirmation: {held['message']}")
            for item in held["first_paths"][:10]:
                self.stdout.write(f"  would remove {item}")
        for problem in upload.errors:
            self.stdout.write(f"  error   {_where(problem)}: {problem['message']}")
        groups, untouched = warning_report(upload.warnings)
        for group in groups:
            if group["count"] == 1:
                problem = group["items"][0]
                self.stdout.write(f"  warning {_where(problem)}: {problem['message']}")
            else:
                more = f" and {group['more_paths']} more" if group["more_paths"] else ""
                self.stdout.write(f"  warning x{group['count']} in {', '.join(group['paths'])}"
                                  f"{more}: {group['message']}")
        if untouched:
            self.stdout.write(f"  ({untouched} more warning(s) about files this upload left "
                              "as they were; --json lists them)")


def _where(problem):
    where = problem["path"]
    if problem.get("line"):
        where += f":{problem['line']}"
    if problem.get("field"):
        where += f" [{problem['field']}]"
    return where
