"""An upload's page: its state, what blocks it, and its validation job."""

from django.http import Http404, JsonResponse
from django.shortcuts import get_object_or_404, render

from portal.accounts.permissions import Action, access, can
from portal.datasets.models import Upload
from portal.jobs.models import Job


def visible_upload(user, upload_id):
    upload = get_object_or_404(Upload.objects.select_related("site", "study"), pk=upload_id)
    if not can(user, Action.VIEW, site=upload.site):
        raise Http404("no such upload")
    return upload


@access("checked")
def upload_detail(request, upload_id):
    upload = visible_upload(request.user, upload_id)
    job = Job.objects.filter(target_type="datasets.upload", target_id=str(upload.pk)).first()
    version = getattr(upload, "version", None) if upload.state == "accepted" else None
    recordings = version.recordings.select_related("participant")[:500] if version else []
    return render(request, "datasets/upload.html", {
        "upload": upload, "job": job, "version": version, "recordings": recordings,
    })


@access("checked")
def api_upload(request, upload_id):
    upload = visible_upload(request.user, upload_id)
    version = getattr(upload, "version", None) if upload.state == "accepted" else None
    return JsonResponse({
        "upload": upload.pk, "state": upload.state, "site": upload.site.slug,
        "study": upload.study.slug, "dataset_version": version.pk if version else None,
        "errors": upload.errors, "warnings": upload.warnings,
    })
