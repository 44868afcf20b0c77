"""The upload API for lab servers: announce, send chunks at offsets, finish with a sha256."""

import json

from django.http import JsonResponse
from django.urls import reverse
from django.views.decorators.http import require_GET, require_http_methods

from portal.accounts.permissions import access, get_visible_site, pairs_q, uploads_anywhere
from portal.api_lists import answers_bad_query, filtered, page, when
from portal.api_spec import (
    BOOLEAN,
    DATETIME,
    INTEGER,
    RESEARCH_USE,
    STRING,
    array,
    nullable,
    obj,
    with_notice,
)
from portal.datasets.access import (
    may_download_version,
    may_upload,
    upload_studies,
    version_visible,
    visible_upload,
    visible_version,
)
from portal.datasets.downloads import version_zip
from portal.datasets.models import DatasetVersion, UploadState
from portal.datasets.services import (
    UploadError,
    cancel_held,
    confirm_removals,
    finish_chunked,
    missing_ranges,
    removal_words,
    start_chunked,
    upload_job,
    write_chunk,
)


def _error(exc, status=400):
    return JsonResponse({"error": str(exc), "field": getattr(exc, "field", None)}, status=status)


def _json_body(request):
    try:
        data = json.loads(request.body or b"{}")
    except (ValueError, UnicodeDecodeError):
        raise UploadError("the request body must be a JSON object", field="body") from None
    if not isinstance(data, dict):
        raise UploadError("the request body must be a JSON object", field="body")
    return data


def _flag(data, key, default):
    value = data.get(key, default)
    if not isinstance(value, bool):
        raise UploadError(f"{key} must be true or false, got {value!r}", field=key)
    return value


def _own_upload(request, upload_id):
    """The upload if the user may send data for it, else (None, a 403 answer); 404 if unseen."""
    upload = visible_upload(request.user, upload_id)
    if not may_upload(request.user, upload.site, upload.study):
        return None, _error(UploadError("you may not upload for this site"), status=403)
    return upload, None


def upload_json(upload):
    version = getattr(upload, "version", None) if upload.state == UploadState.ACCEPTED else None
    job = upload_job(upload)
    out = {
        "upload": upload.pk, "state": upload.state, "site": upload.site.slug,
        "study": upload.study.slug, "mode": upload.mode,
        "dataset_version": version.pk if version else None,
        "errors": upload.errors, "warnings": upload.warnings,
        "job": {"id": job.pk, "state": job.state, "done": job.progress_done,
                "total": job.progress_total} if job else None,
    }
    if upload.state == UploadState.RECEIVING:
        out.update(size=upload.expected_bytes, received=upload.received,
                   missing=missing_ranges(upload))
    if upload.state == UploadState.FAILED:
        out.update(failure=upload.failure, next_step=upload.next_step)
    out["allow_removals"] = upload.allow_removals
    if upload.state == UploadState.HELD:
        removals = upload.pending_removals
        out["needs_confirmation"] = {
            "message": f"this snapshot would remove {removal_words(removals)}; nothing has "
                       "changed yet. POST {\"allow_removals\": true} to "
                       f"/api/v1/uploads/{upload.pk}/confirm/ to go on, or "
                       "{\"allow_removals\": false} to cancel",
            "files": removals["files"], "first_paths": removals["first_paths"],
            "participants": removals["participants"],
            "dataset_version": removals["parent"],
        }
    return out


@access("checked")
@require_http_methods(["POST"])
def create_upload(request):
    """POST {"site", "study", "mode", "filename", "size"} → 201 with the upload's id."""
    if not uploads_anywhere(request.user):
        return _error(UploadError("your roles do not include uploading data"), status=403)
    try:
        data = _json_body(request)
        site = get_visible_site(request.user, str(data.get("site", "")))
        slug = str(data.get("study", ""))
        if not site.studies.filter(slug=slug).exists():
            raise UploadError(f"site {site.slug} takes part in no study {slug!r}",
                              field="study")
        study = upload_studies(request.user, site).filter(slug=slug).first()
        if study is None:
            mine = ", ".join(s.slug for s in upload_studies(request.user, site)) or "none"
            return _error(UploadError(f"you may not upload {site.slug}'s data to study "
                                      f"{slug}; the studies you upload to there: {mine}",
                                      field="study"), status=403)
        upload = start_chunked(
            site=site, study=study, user=request.user, mode=data.get("mode", "snapshot"),
            label=str(data.get("filename", "upload")), expected_bytes=data.get("size"),
            token=request.api_token, allow_removals=_flag(data, "allow_removals", False),
        )
    except UploadError as exc:
        return _error(exc)
    return JsonResponse(upload_json(upload), status=201)


@access("checked")
@require_http_methods(["GET"])
def upload_status(request, upload_id):
    return JsonResponse(upload_json(visible_upload(request.user, upload_id)))


@access("checked")
@require_http_methods(["PUT"])
def upload_chunk(request, upload_id):
    """PUT raw bytes to …/chunks/?offset=N (Content-Length required). Repeats are harmless."""
    upload, refusal = _own_upload(request, upload_id)
    if refusal:
        return refusal
    try:
        offset = int(request.GET.get("offset", ""))
        length = int(request.META.get("CONTENT_LENGTH") or -1)
    except ValueError:
        return _error(UploadError("give ?offset=<byte offset> and a Content-Length",
                                  field="offset"))
    if length < 0:
        return _error(UploadError("a Content-Length header is required", field="length"))
    try:
        upload = write_chunk(upload.pk, offset=offset, stream=request, length=length)
    except UploadError as exc:
        return _error(exc, status=409 if exc.field == "state" else 400)
    return JsonResponse(upload_json(upload))


@access("checked")
@require_http_methods(["POST"])
def finish_upload(request, upload_id):
    """POST {"sha256": "<hex>"}: checks completeness and the checksum, then queues validation."""
    upload, refusal = _own_upload(request, upload_id)
    if refusal:
        return refusal
    try:
        data = _json_body(request)
        upload = finish_chunked(upload.pk, sha256=str(data.get("sha256", "")),
                                user=request.user, token=request.api_token)
    except UploadError as exc:
        return _error(exc, status=409 if exc.field == "state" else 400)
    status = 422 if upload.state == UploadState.REJECTED else 202
    return JsonResponse(upload_json(upload), status=status)


@access("checked")
@require_http_methods(["POST"])
def confirm_upload(request, upload_id):
    """POST {"allow_removals": true} to let a held upload remove what it named (it is checked
    again and becomes a version), or {"allow_removals": false} to cancel it."""
    upload, refusal = _own_upload(request, upload_id)
    if refusal:
        return refusal
    try:
        data = _json_body(request)
        if "allow_removals" not in data:
            raise UploadError('send {"allow_removals": true} to confirm the removals or '
                              'false to cancel the upload', field="allow_removals")
        act = confirm_removals if _flag(data, "allow_removals", None) else cancel_held
        upload = act(upload.pk, user=request.user, token=request.api_token)
    except UploadError as exc:
        return _error(exc, status=409 if exc.field == "state" else 400)
    return JsonResponse(upload_json(upload), status=202 if upload.allow_removals else 200)


# --- reading: dataset versions for scripts -----------------------------------------------------

VERSION_SCHEMA = obj({
    "id": INTEGER, "study": STRING, "site": STRING, "number": INTEGER,
    "parent": nullable(INTEGER), "upload": INTEGER, "manifest_sha256": STRING,
    "n_files": INTEGER, "total_bytes": INTEGER, "created_at": DATETIME,
    "download": STRING,
})
VERSION_DETAIL_SCHEMA = obj({
    **VERSION_SCHEMA["properties"],
    "manifest": obj({"n_files": INTEGER, "total_bytes": INTEGER, "sha256": STRING,
                     "n_recordings": INTEGER, "n_participants": INTEGER,
                     "tasks": array(STRING), "changes": {"type": "object",
                                                         "additionalProperties": INTEGER}}),
    "quality_rounds": array(INTEGER), "may_download": BOOLEAN, "research_use": STRING,
})


def version_json(version):
    return {"id": version.pk, "study": version.study.slug, "site": version.site.slug,
            "number": version.number, "parent": version.parent_id, "upload": version.upload_id,
            "manifest_sha256": version.manifest_sha256, "n_files": version.n_files,
            "total_bytes": version.total_bytes, "created_at": when(version.created_at),
            "download": reverse("api:version_download", args=[version.pk])}


@access("checked")
@require_GET
@answers_bad_query
def versions(request):
    """Dataset versions of the (site, study) pairs the token sees, newest first."""
    rows = filtered(request, DatasetVersion.objects.filter(pairs_q(request.user))
                    .select_related("site", "study"),
                    {"study": "study__slug", "site": "site__slug", "created": "created_at"})
    return JsonResponse(page(request, "versions", rows, version_json,
                             visible=lambda v: version_visible(request.user, v)))


@access("checked")
@require_GET
def version(request, version_id):
    """One version with a summary of its manifest."""
    version = visible_version(request.user, version_id)
    recordings = version.recordings.all()
    changes = {key: len(value) for key, value in (version.diff or {}).items()
               if isinstance(value, list | dict)}
    return JsonResponse({
        **version_json(version),
        "manifest": {
            "n_files": version.n_files, "total_bytes": version.total_bytes,
            "sha256": version.manifest_sha256, "n_recordings": recordings.count(),
            "n_participants": recordings.values("participant").distinct().count(),
            "tasks": sorted(set(recordings.values_list("task", flat=True))),
            "changes": changes},
        "quality_rounds": list(version.qc_rounds.order_by("-pk").values_list("pk", flat=True)),
        "may_download": may_download_version(request.user, version),
        "research_use": RESEARCH_USE,
    })


@access("checked")
@require_GET
def version_download(request, version_id):
    """The whole version as a zip: the web download itself (same rules, same audit event)."""
    return with_notice(version_zip(request, version_id))
