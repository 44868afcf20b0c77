"""Removing blobs no version refers to, and staging files no live upload owns.

A crash between storing blobs and committing a version leaves unreferenced blobs; a broken-off
browser upload leaves staging files. Both are removed once older than a grace period, so work
in progress is never touched.
"""

import time
from pathlib import Path

from django.apps import apps
from django.conf import settings

from portal.datasets.models import Upload, UploadState

#: Every model field that holds a blob's sha256. Add new ones here.
BLOB_REFERENCES = [
    ("datasets.VersionFile", "sha256"),
    ("features.RecordingFeatures", "table_sha256"),
    ("features.FeatureSet", "table_sha256"),
    ("features.FeatureSet", "sidecar_sha256"),
    ("training.ModelRelease", "model_sha256"),
    ("training.ModelRelease", "card_sha256"),
    ("training.ModelRelease", "spec_sha256"),
]


def referenced_blobs():
    found = set()
    for label, field in BLOB_REFERENCES:
        found.update(apps.get_model(label).objects.values_list(field, flat=True).distinct())
    return found


def collect(*, older_than_s=3600.0, dry_run=False):
    """Remove unreferenced blobs and orphaned staging files older than ``older_than_s``."""
    cutoff = time.time() - older_than_s
    keep = referenced_blobs()
    removed_blobs, freed = [], 0
    root = Path(settings.BLOB_ROOT)
    for path in root.glob("??/??/*") if root.exists() else []:
        if path.name in keep or path.stat().st_mtime > cutoff:
            continue
        freed += path.stat().st_size
        removed_blobs.append(path.name)
        if not dry_run:
            path.unlink()
    live = set(Upload.objects.filter(state__in=[
        UploadState.RECEIVING, UploadState.QUEUED, UploadState.VALIDATING,
    ]).values_list("staging_name", flat=True))
    removed_staging = []
    staging = Path(settings.STAGING_ROOT)
    for path in staging.glob("upload-*") if staging.exists() else []:
        if path.name in live or path.stat().st_mtime > cutoff:
            continue
        freed += path.stat().st_size
        removed_staging.append(path.name)
        if not dry_run:
            path.unlink()
    return {"blobs": removed_blobs, "staging": removed_staging, "bytes": freed}
