"""Uploads (web form), their reports, dataset versions and downloads."""

import csv
import datetime
import io
from pathlib import Path

from django.contrib import messages
from django.core.exceptions import PermissionDenied
from django.core.paginator import Paginator
from django.http import (
    FileResponse,
    Http404,
    HttpResponse,
    JsonResponse,
)
from django.shortcuts import get_object_or_404, redirect, render
from django.urls import reverse
from django.views.decorators.csrf import csrf_exempt
from django.views.decorators.http import require_POST

from portal.accounts.permissions import Action, access, get_visible_site, require
from portal.audit.events import record
from portal.datasets import blobs
from portal.datasets.access import (
    may_download_version,
    may_upload,
    upload_studies,
    visible_upload,
    visible_version,
)
from portal.datasets.downloads import version_zip
from portal.datasets.forms import UploadForm
from portal.datasets.models import DatasetVersion, Upload, UploadState, VersionFile
from portal.datasets.services import (
    UploadError,
    cancel_held,
    confirm_removals,
    pack_staged_files,
    pending_removals,
    removal_words,
    restore_version,
    safe_relative_path,
    submit_staged,
    upload_job,
    warning_report,
)
from portal.datasets.uploadhandler import StagingUploadHandler, csrf_refusal
from portal.spreadsheet import safe_row


@access("checked")
def upload_detail(request, upload_id):
    return render(request, "datasets/upload.html", _upload_context(request.user, upload_id))


@access("checked")
def upload_status(request, upload_id):
    """The upload's state and validation progress alone (HTML for htmx), polled until the
    upload is accepted or rejected."""
    return render(request, "datasets/_upload_status.html",
                  _upload_context(request.user, upload_id))


#: The report's columns, one row per problem or warning (CSV).
REPORT_COLUMNS = ("upload", "severity", "path", "line", "field", "message", "code")


def report_of(upload):
    """The upload's report as one JSON-ready object: state, what was sent, its problems (the
    upload is refused) and warnings, times in ISO 8601 UTC."""
    def utc(moment):
        return moment.astimezone(datetime.UTC).isoformat() if moment else None

    version = getattr(upload, "version", None) if upload.state == UploadState.ACCEPTED else None
    return {
        "upload": upload.pk, "site": upload.site.slug, "study": upload.study.slug,
        "mode": upload.mode, "state": upload.state, "label": upload.label,
        "archive_sha256": upload.archive_sha256, "archive_bytes": upload.archive_bytes,
        "received_at": utc(upload.created_at), "finished_at": utc(upload.finished_at),
        "dataset_version": version.number if version else None,
        "failure": upload.failure or None,
        "errors": upload.errors, "warnings": upload.warnings,
    }


@access("checked")
def upload_report(request, upload_id, fmt):
    """The upload's report as a file (report.json or report.csv), for the same people as the
    upload page; the CSV's text cells are made inert for spreadsheets."""
    upload = visible_upload(request.user, upload_id)
    if fmt not in ("json", "csv"):
        raise Http404("the report is offered as report.json or report.csv")
    report = report_of(upload)
    name = f"upload-{upload.pk}-report.{fmt}"
    if fmt == "json":
        response = JsonResponse(report, json_dumps_params={"indent": 1})
    else:
        out = io.StringIO()
        writer = csv.writer(out)
        writer.writerow(REPORT_COLUMNS)
        for severity, items in (("error", upload.errors), ("warning", upload.warnings)):
            for item in items:
                writer.writerow(safe_row([upload.pk, severity, item.get("path", ""),
                                          item.get("line") or "", item.get("field") or "",
                                          item.get("message", ""), item.get("code") or ""]))
        response = HttpResponse(out.getvalue(), content_type="text/csv; charset=utf-8")
    response["Content-Disposition"] = f'attachment; filename="{name}"'
    return response


def _upload_context(user, upload_id):
    upload = visible_upload(user, upload_id)
    version = getattr(upload, "version", None) if upload.state == UploadState.ACCEPTED else None
    held = upload.state == UploadState.HELD
    groups, untouched = warning_report(upload.warnings)
    return {"upload": upload, "job": upload_job(upload), "version": version,
            "removals": upload.pending_removals if held else None,
            "removal_words": removal_words(upload.pending_removals) if held else "",
            "may_confirm": held and may_upload(user, upload.site, upload.study),
            "warning_groups": groups, "untouched_warnings": untouched,
            "may_resend": may_upload(user, upload.site, upload.study)}


@access("checked")
@require_POST
def upload_confirm(request, upload_id):
    """The sender's yes to the removals a held upload would make: it is checked again and
    becomes a version."""
    upload = visible_upload(request.user, upload_id)
    require(request.user, Action.UPLOAD, site=upload.site, study=upload.study)
    try:
        confirm_removals(upload.pk, user=request.user)
    except UploadError as exc:
        messages.error(request, str(exc))
    return redirect("datasets:upload", upload.pk)


@access("checked")
@require_POST
def upload_cancel(request, upload_id):
    """The sender's no: the held upload ends rejected and nothing stored changes."""
    upload = visible_upload(request.user, upload_id)
    require(request.user, Action.UPLOAD, site=upload.site, study=upload.study)
    try:
        cancel_held(upload.pk, user=request.user)
    except UploadError as exc:
        messages.error(request, str(exc))
    return redirect("datasets:upload", upload.pk)


@access("checked")
@csrf_exempt
def upload_new(request, site_slug):
    """The web upload: one archive, or the files of a dataset folder, streamed to staging."""
    site = get_visible_site(request.user, site_slug)
    if not upload_studies(request.user, site).exists():
        raise PermissionDenied(f"you may not upload for {site.slug}")
    if request.method == "POST":
        # Log-in, permission and CSRF are checked before the body is read: reading it writes
        # the files to staging through our handler.
        refusal = csrf_refusal(request)
        if refusal is not None:
            if request.headers.get("Accept", "").startswith("application/json"):
                return JsonResponse({"error": "the form's security token is missing or "
                                     "expired; reload the upload page and send again",
                                     "field": "csrf"}, status=403)
            return refusal
        request.upload_handlers = [StagingUploadHandler(request)]
        return _receive(request, site)
    studies = upload_studies(request.user, site)
    # "Send a corrected dataset" from an upload's report arrives with its study and mode.
    initial = {key: request.GET[key] for key in ("study", "mode") if request.GET.get(key)}
    corrects = None
    if request.GET.get("corrects", "").isdigit():
        corrects = (Upload.objects.filter(pk=int(request.GET["corrects"]), site=site,
                                          study__in=studies).first())
    return render(request, "datasets/upload_new.html", {
        "site": site, "form": UploadForm(studies=studies, initial=initial),
        "corrects": corrects,
    })


def _staged_of(request):
    return [f for key in ("archive", "files") for f in request.FILES.getlist(key)]


def _receive(request, site):
    studies = upload_studies(request.user, site)
    form = UploadForm(request.POST, studies=studies)
    staged = _staged_of(request)
    wants_json = request.headers.get("Accept", "").startswith("application/json")
    try:
        if not form.is_valid():
            raise UploadError("choose the study and what the files are", field="study")
        study = studies.get(slug=form.cleaned_data["study"])
        archives, files = request.FILES.getlist("archive"), request.FILES.getlist("files")
        if bool(archives) == bool(files):
            raise UploadError("send either one archive (.zip, .tar, .tar.gz) or the files of "
                              "a dataset folder", field="files")
        if archives:
            if len(archives) > 1:
                raise UploadError("send one archive at a time", field="archive")
            item = archives[0]
            upload = submit_staged(
                item.staged_path, label=item.name, sha256=item.sha256, size=item.size,
                site=site, study=study, user=request.user, mode=form.cleaned_data["mode"],
                via="web",
            )
        else:
            paths = request.POST.getlist("paths") or [f.name for f in files]
            if len(paths) != len(files):
                raise UploadError(f"{len(files)} files but {len(paths)} paths were sent",
                                  field="paths")
            pieces = [(safe_relative_path(p), f.staged_path) for p, f in zip(paths, files,
                                                                             strict=True)]
            target, sha256, size = pack_staged_files(pieces)
            top = {piece[0].parts[0] for piece in pieces}
            label = top.pop() if len(top) == 1 and len(pieces) > 1 else f"{len(pieces)} files"
            upload = submit_staged(
                target, label=label, sha256=sha256, size=size, site=site, study=study,
                user=request.user, mode=form.cleaned_data["mode"], via="web",
            )
    except UploadError as exc:
        for item in staged:
            Path(item.staged_path).unlink(missing_ok=True)
        if wants_json:
            return JsonResponse({"error": str(exc), "field": exc.field}, status=400)
        return render(request, "datasets/upload_new.html", {
            "site": site, "form": form, "error": str(exc),
        }, status=400)
    url = reverse("datasets:upload", args=[upload.pk])
    if wants_json:
        return JsonResponse({"upload": upload.pk, "url": url}, status=201)
    return redirect(url)


@access("checked")
def version_detail(request, version_id):
    version = visible_version(request.user, version_id)
    recordings = Paginator(
        version.recordings.select_related("participant").prefetch_related("blocks"), 50
    ).get_page(request.GET.get("page"))
    return render(request, "datasets/version.html", {
        "version": version, "recordings": recordings,
        "participants": version.recordings.values("participant__label").distinct().count(),
        "files": version.files.all()[:200],
        "may_download": may_download_version(request.user, version),
        "may_restore": may_upload(request.user, version.site, version.study),
        "is_latest": not DatasetVersion.objects.filter(
            site=version.site_id, study=version.study_id, number__gt=version.number).exists(),
    })


def _restore_preview(version):
    """(latest version, its diff to ``version``'s files, what restoring would remove)."""
    from portal.datasets.jobs import _diff

    latest = (DatasetVersion.objects.filter(site=version.site_id, study=version.study_id)
              .order_by("-number").first())
    if latest.pk == version.pk:
        return latest, None, None
    files = {f.path: (f.sha256, f.bytes) for f in version.files.all()}
    diff = _diff({f.path: (f.sha256, f.bytes) for f in latest.files.all()}, files)
    people = set(version.recordings.values_list("participant__label", flat=True))
    return latest, diff, pending_removals(latest, files, people)


@access("checked")
def version_restore(request, version_id):
    """Make an earlier version the latest again, as a new version: the page shows what would
    be added, changed and removed against the latest, and asks for a yes."""
    version = visible_version(request.user, version_id)
    require(request.user, Action.UPLOAD, site=version.site, study=version.study)
    latest, diff, removals = _restore_preview(version)
    error = ""
    if request.method == "POST":
        try:
            restored = restore_version(version, user=request.user,
                                       allow_removals=request.POST.get("allow_removals") == "1")
        except UploadError as exc:
            error = str(exc)
        else:
            messages.success(request, f"Version {restored.number} restores version "
                                      f"{version.number}.")
            return redirect("datasets:version", restored.pk)
    return render(request, "datasets/restore.html", {
        "version": version, "latest": latest, "diff": diff, "removals": removals,
        "removal_words": removal_words(removals) if removals else "", "error": error,
    }, status=400 if error else 200)


@access("checked")
def download_file(request, version_id, file_id):
    version = visible_version(request.user, version_id)
    require(request.user, Action.DOWNLOAD, site=version.site, study=version.study)
    item = get_object_or_404(VersionFile, pk=file_id, version=version)
    record("download", actor=request.user, token=getattr(request, "api_token", None),
           site=version.site, study=version.study, target=item,
           summary=f"downloaded {item.path} of {version}",
           outputs=[{"path": item.path, "sha256": item.sha256, "bytes": item.bytes}])
    return FileResponse(blobs.open_blob(item.sha256), as_attachment=True,
                        filename=item.path.rsplit("/", 1)[-1])


@access("checked")
def download_version(request, version_id):
    return version_zip(request, version_id)
