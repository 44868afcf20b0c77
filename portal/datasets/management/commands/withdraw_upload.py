from django.core.management.base import BaseCommand, CommandError
from django.db import transaction
from django.utils import timezone

from portal.audit.events import record
from portal.audit.models import Event
from portal.datasets.models import Upload, UploadState
from portal.datasets.services import staging_path
from portal.jobs.models import Job, JobState


def withdrawn(upload):
    return Event.objects.filter(verb="upload.withdrawn", target_type="datasets.upload",
                                target_id=str(upload.pk)).exists()


class Command(BaseCommand):
    help = (
        "Withdraw an upload that is still receiving chunks or waiting for validation (e.g. "
        "sent by mistake): it ends rejected with the reason, its staged bytes are removed and "
        "its waiting validation is cancelled. Accepted data is never removed. Records an audit "
        "event; safe to run again."
    )

    def add_arguments(self, parser):
        parser.add_argument("upload", type=int, help="the upload's number")
        parser.add_argument("--reason", required=True, help="why; shown to the site and kept "
                                                            "in the audit event")

    def handle(self, *args, upload, reason, **options):
        with transaction.atomic():
            item = Upload.objects.select_for_update().select_related("site", "study").filter(
                pk=upload).first()
            if item is None:
                raise CommandError(f"no upload {upload}; uploads are numbered on the operator "
                                   "pages and in upload_bids --json output")
            if withdrawn(item):
                self.stdout.write(f"upload {upload} was already withdrawn; nothing to do")
                return
            job = self._cancel_validation(item)
            before = item.state
            item.state = UploadState.REJECTED
            item.finished_at = timezone.now()
            item.errors = [{"path": item.label, "line": None, "field": None,
                            "message": f"withdrawn by an operator: {reason}. Send the dataset "
                                       "again if it should be checked"}]
            item.save(update_fields=["state", "finished_at", "errors"])
            record("upload.withdrawn", target=item, site=item.site, study=item.study,
                   summary=f"upload {upload} withdrawn by an operator",
                   params={"reason": reason, "state_before": before,
                           "job": job.pk if job else None},
                   inputs=[{"name": item.label, "sha256": item.archive_sha256,
                            "bytes": item.archive_bytes}])
            path = staging_path(item) if item.staging_name else None
            if path is not None:
                transaction.on_commit(lambda: path.unlink(missing_ok=True))
        self.stdout.write(f"upload {upload} ({item.site.slug}, {item.label}) withdrawn: was "
                          f"{before}" + (f"; validation job {job.pk} cancelled" if job else ""))

    def _cancel_validation(self, item):
        """The upload's validation job, cancelled while still waiting; refuses otherwise."""
        if item.state == UploadState.RECEIVING:
            return None
        if item.state != UploadState.QUEUED:
            raise CommandError(
                f"upload {item.pk} is {item.get_state_display()}: only an upload still "
                "receiving or waiting for validation can be withdrawn"
                + ("; a dataset version, once accepted, stays on record"
                   if item.state == UploadState.ACCEPTED else ""))
        job = Job.objects.filter(kind="upload.validate", target_type="datasets.upload",
                                 target_id=str(item.pk)).order_by("-pk").first()
        if job is None:
            return None
        # One conditional update: a worker claims a job the same way, so exactly one wins.
        cancelled = Job.objects.filter(pk=job.pk, state=JobState.QUEUED).update(
            state=JobState.FAILED, finished_at=timezone.now(), lease_expires_at=None,
            error="cancelled: the upload was withdrawn by an operator")
        if not cancelled:
            job.refresh_from_db(fields=["state"])
            raise CommandError(f"upload {item.pk} is being validated now (job {job.pk} is "
                               f"{job.get_state_display()}): wait for its result")
        return job
