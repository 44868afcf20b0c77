"""Removing blobs no version refers to, and staging left behind by uploads and validations.

A crash between storing blobs and committing a version leaves unreferenced blobs; a broken-off
browser upload or chunk leaves staging files; a failed or rejected upload leaves its archive; a
killed validation leaves its ``work-*`` folder. All are removed once older than a grace period,
so work in progress is never touched. Resumable uploads that stopped receiving chunks are
ended first (``UPLOAD_ABANDONED_AFTER_S``).
"""

import re
import shutil
import time
from pathlib import Path

from django.apps import apps
from django.conf import settings

from portal.datasets import blobs
from portal.datasets.models import Upload
from portal.datasets.services import STAGED_STATES, expire_abandoned
from portal.jobs.models import Job, JobState

#: Every model field that holds a blob's sha256. Add new ones here.
BLOB_REFERENCES = [
    ("datasets.VersionFile", "sha256"),
    ("features.RecordingFeatures", "table_sha256"),
    ("features.FeatureSet", "table_sha256"),
    ("features.FeatureSet", "sidecar_sha256"),
    ("training.ModelRelease", "model_sha256"),
    ("training.ModelRelease", "card_sha256"),
    ("training.ModelRelease", "spec_sha256"),
    ("training.ModelRelease", "bundle_sha256"),
]

#: A work folder made by ``temporary_dir(job, token)``: work-job<id>-<claim token>-<random>.
WORK_OWNER = re.compile(r"^work-job(\d+)-([0-9a-f]+)-")


def referenced_blobs():
    found = set()
    for label, field in BLOB_REFERENCES:
        found.update(apps.get_model(label).objects.values_list(field, flat=True).distinct())
    return found


def _tree(path):
    """(bytes, newest modification time) of a file or of everything in a folder."""
    if not path.is_dir():
        stat = path.stat()
        return stat.st_size, stat.st_mtime
    size, newest = 0, path.stat().st_mtime
    for item in path.rglob("*"):
        try:
            stat = item.lstat()
        except FileNotFoundError:  # removed while we looked
            continue
        newest = max(newest, stat.st_mtime)
        if item.is_file():
            size += stat.st_size
    return size, newest


def _work_in_use(name):
    """True while the job named in a work folder's name still runs under that claim."""
    owner = WORK_OWNER.match(name)
    if owner is None:
        return False
    job_id, token = owner.groups()
    return Job.objects.filter(pk=int(job_id), state=JobState.RUNNING, claim=token).exists()


def _staging_owners():
    """{staging file name: (upload id, state)} of every upload that names a staging file."""
    return {name: (pk, state) for pk, name, state in
            Upload.objects.exclude(staging_name="").values_list("pk", "staging_name", "state")}


def _staging_reason(path, owners):
    """Why a staging entry may go (once old enough), or None while something still needs it."""
    name = path.name
    if name.startswith("work-"):
        return None if _work_in_use(name) else "work folder of a validation that stopped"
    archive, _, piece = name.partition(".chunk-")
    upload_id, state = owners.get(archive, (None, None))
    if piece:
        return "chunk that was never completed"
    if upload_id is None:
        return "no upload refers to it"
    if state in STAGED_STATES:
        return None
    return f"archive of upload {upload_id}, which is {state}"


def collect(*, older_than_s=3600.0, dry_run=False):
    """End abandoned resumable uploads, then remove unreferenced blobs, unfinished blob writes
    and staging entries nothing needs, each once older than ``older_than_s``.

    Returns the names and bytes removed (or that would be, with ``dry_run``) and the uploads
    ended as abandoned.
    """
    abandoned = expire_abandoned(dry_run=dry_run)
    cutoff = time.time() - older_than_s
    keep = referenced_blobs()
    items = []
    # A blob stored after the references were read is younger than the grace period: it stays.
    store = blobs.store()
    for entry, reason in [*((e, None if e.name in keep else "no version or result refers to it")
                            for e in store.blobs()),
                          *((e, "unfinished write") for e in store.unfinished())]:
        if reason is None or entry.modified > cutoff:
            continue
        items.append({"kind": "blob", "name": entry.name, "bytes": entry.bytes, "why": reason})
        if not dry_run:
            store.remove(entry)
    candidates = []
    staging = Path(settings.STAGING_ROOT)
    owners = _staging_owners()
    for path in sorted(staging.iterdir()) if staging.exists() else []:
        if path.name.startswith(("upload-", "work-")):
            candidates.append((path, "staging", _staging_reason(path, owners)))
    for path, kind, reason in candidates:
        if reason is None:
            continue
        size, newest = _tree(path)
        if newest > cutoff:
            continue
        items.append({"kind": kind, "name": path.name, "bytes": size, "why": reason})
        if not dry_run:
            if path.is_dir():
                shutil.rmtree(path, ignore_errors=True)
            else:
                path.unlink(missing_ok=True)
    items += [{"kind": "staging", "name": a["staging"], "bytes": a["bytes"],
               "why": f"upload {a['upload']} abandoned (no chunk for "
                      f"{settings.UPLOAD_ABANDONED_AFTER_S / 3600:g} hours)"} for a in abandoned]
    return {
        "blobs": [i["name"] for i in items if i["kind"] == "blob"],
        "staging": [i["name"] for i in items if i["kind"] == "staging"],
        "items": items,
        "bytes": sum(i["bytes"] for i in items),
        "abandoned_uploads": [a["upload"] for a in abandoned],
    }
