"""The one path every upload takes, whether it comes from the web, the API or a command."""

import hashlib
import os
import tempfile
from pathlib import Path

from django.conf import settings
from django.db import transaction
from django.utils import timezone

from portal.accounts.permissions import Action, require
from portal.audit.events import record
from portal.datasets import blobs
from portal.datasets.models import Upload, UploadMode, UploadState
from portal.jobs.services import enqueue
from workers.archive import pack_folder


class UploadError(ValueError):
    """An upload refused before it was stored; the message says what to do."""


class _HashingWriter:
    def __init__(self, sink):
        self.sink = sink
        self.digest = hashlib.sha256()
        self.size = 0

    def write(self, data):
        self.digest.update(data)
        self.size += len(data)
        return self.sink.write(data)


def _staged_archive(source):
    """Stream ``source`` (a folder, or a .zip/.tar(.gz) file) into staging; returns its path."""
    source = Path(source)
    staging = Path(settings.STAGING_ROOT)
    staging.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=staging, prefix="upload-", suffix=".tar")
    try:
        with os.fdopen(fd, "wb") as sink:
            if source.is_dir():
                if not (source / "dataset_description.json").exists():
                    raise UploadError(
                        f"{source}: no dataset_description.json at the top; give the folder "
                        "that is the root of the BIDS dataset"
                    )
                pack_folder(source, sink)
            elif source.is_file():
                with open(source, "rb") as stream:
                    blobs.hash_stream(stream, sink)
            else:
                raise UploadError(f"{source}: no such file or folder")
    except BaseException:
        os.unlink(tmp)
        raise
    return Path(tmp)


def submit_upload(source, *, site, study, user, mode=UploadMode.SNAPSHOT, via="command",
                  token=None):
    """Stage ``source``, keep it as a blob, and queue its validation. Returns the Upload."""
    require(user, Action.UPLOAD, site=site, study=study)
    if not site.studies.filter(pk=study.pk).exists():
        raise UploadError(f"site {site.slug} does not take part in study {study.slug}")
    staged = _staged_archive(source)
    try:
        sha256, size = blobs.put_file(staged)
    finally:
        staged.unlink(missing_ok=True)
    with transaction.atomic():
        upload = Upload.objects.create(
            site=site, study=study, mode=mode, state=UploadState.QUEUED, source=via,
            label=Path(source).name, archive_sha256=sha256, archive_bytes=size, created_by=user,
        )
        record(
            "upload.received", actor=user, token=token, site=site, study=study, target=upload,
            summary=f"{Path(source).name} ({size} bytes) received via {via}",
            params={"mode": mode, "via": via},
            inputs=[{"name": Path(source).name, "sha256": sha256, "bytes": size}],
        )
        enqueue("upload.validate", target=upload, site=site, study=study, created_by=user)
    return upload


def mark_validating(upload):
    Upload.objects.filter(pk=upload.pk, state=UploadState.QUEUED).update(
        state=UploadState.VALIDATING
    )


def finish_upload(upload, *, errors, warnings, now=None):
    upload.errors = errors
    upload.warnings = warnings
    upload.finished_at = now or timezone.now()
    upload.state = UploadState.REJECTED if errors else UploadState.ACCEPTED
    upload.save(update_fields=["errors", "warnings", "finished_at", "state"])
