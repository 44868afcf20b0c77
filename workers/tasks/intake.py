"""Validating an upload and, if it passes, indexing it as a new dataset version."""

import hashlib
import json
import tempfile
from pathlib import Path

from django.db.models import Max

from portal.audit.events import record
from portal.datasets import blobs
from portal.datasets.models import DatasetVersion, Participant, Recording, Upload
from portal.datasets.services import finish_upload, mark_validating
from portal.studies.models import current_protocol
from portal.studies.protocol import level_for_rating
from workers.archive import ArchiveError, extract_archive, list_files


def validate_upload(ctx):
    from workers.bids.validate import validate_dataset

    upload = Upload.objects.select_related("site", "study").get(pk=ctx.job.target_id)
    mark_validating(upload)
    protocol = current_protocol(upload.study).data
    scale = protocol["rating_scale"]
    with tempfile.TemporaryDirectory(prefix="cairn-upload-") as tmp:
        root = Path(tmp) / "dataset"
        try:
            extract_archive(blobs.blob_path(upload.archive_sha256), root)
        except ArchiveError as exc:
            errors = [{"path": upload.label, "line": None, "field": None, "message": str(exc)}]
            return _reject(ctx, upload, errors, [])
        report = validate_dataset(
            root, rating_column=scale.get("column", "workload_rating"),
            condition_column=protocol.get("condition_column", "difficulty"),
            rating_min=scale["min"], rating_max=scale["max"],
            on_file=lambda done, total: ctx.progress(done, total + 1, f"checked {done} of {total}"),
        )
        result = report.as_dict()
        if not report.ok:
            return _reject(ctx, upload, result["errors"], result["warnings"])
        manifest = []
        for relative in list_files(root):
            sha256, size = blobs.put_file(root / relative)
            manifest.append({"path": relative, "sha256": sha256, "bytes": size})
    by_path = {item["path"]: item["sha256"] for item in manifest}
    manifest_sha = hashlib.sha256(
        json.dumps(manifest, sort_keys=True, separators=(",", ":")).encode()
    ).hexdigest()
    with ctx.finish() as job:
        number = (
            DatasetVersion.objects.filter(site=upload.site, study=upload.study)
            .aggregate(n=Max("number"))["n"] or 0
        ) + 1
        version = DatasetVersion.objects.create(
            site=upload.site, study=upload.study, number=number, upload=upload,
            manifest=manifest, manifest_sha256=manifest_sha,
        )
        for info in result["recordings"]:
            participant, _ = Participant.objects.get_or_create(
                site=upload.site, label=info["participant"]
            )
            rating = info["rating"]
            Recording.objects.create(
                version=version, participant=participant, path=info["path"],
                sha256=by_path[info["path"]], session=info["session"], task=info["task"],
                run=info["run"], sfreq_hz=info["sfreq_hz"], n_channels=info["n_channels"],
                duration_s=info["duration_s"], power_line_hz=info["power_line_hz"],
                condition=info["condition"], rating=rating,
                level=(level_for_rating(protocol, rating) or "") if rating is not None else "",
            )
        finish_upload(upload, errors=[], warnings=result["warnings"])
        job.result = {"dataset_version": version.pk, "recordings": len(result["recordings"])}
        record(
            "upload.accepted", target=upload, site=upload.site, study=upload.study, worker=True,
            summary=f"upload {upload.pk} accepted with {len(result['warnings'])} warning(s)",
            inputs=[{"upload": upload.pk, "sha256": upload.archive_sha256}],
        )
        record(
            "dataset_version.created", target=version, site=upload.site, study=upload.study,
            worker=True, summary=f"{upload.site.slug} version {number}: "
            f"{len(result['recordings'])} recordings, {len(manifest)} files",
            inputs=[{"upload": upload.pk, "sha256": upload.archive_sha256}],
            outputs=[{"dataset_version": version.pk, "manifest_sha256": manifest_sha}],
        )


def _reject(ctx, upload, errors, warnings):
    with ctx.finish() as job:
        finish_upload(upload, errors=errors, warnings=warnings)
        job.result = {"rejected": True, "errors": len(errors)}
        record(
            "upload.rejected", target=upload, site=upload.site, study=upload.study, worker=True,
            summary=f"upload {upload.pk} rejected: {len(errors)} error(s)",
            inputs=[{"upload": upload.pk, "sha256": upload.archive_sha256}],
            params={"first_error": errors[0]["message"][:200] if errors else ""},
        )
