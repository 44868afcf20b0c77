"""The one path every upload takes, whether it comes from the web, the API or a command.

Bytes are written to staging as they arrive and hashed on the way; nothing is read whole into
memory. The archive stays in staging until its validation job decides: accepted files become
content-addressed blobs, a rejected upload keeps only its report.
"""

import hashlib
import os
import tarfile
import tempfile
import uuid
from datetime import timedelta
from pathlib import Path, PurePosixPath

from django.conf import settings
from django.db import transaction
from django.db.models import Q
from django.utils import timezone

from cairn_science.archive import ArchiveError, pack_folder
from portal.accounts.models import Site
from portal.accounts.permissions import Action, require
from portal.audit.events import record
from portal.datasets.blobs import FULL_ERRNOS
from portal.datasets.models import DatasetVersion, Upload, UploadMode, UploadState
from portal.jobs.services import enqueue

CHUNK_BYTES = 1024 * 1024


class UploadError(ValueError):
    """An upload refused before validation; the message says what to do."""

    def __init__(self, message, *, field=None):
        super().__init__(message)
        self.field = field


class _HashingWriter:
    """A binary sink that hashes and counts what passes through it."""

    def __init__(self, sink):
        self.sink = sink
        self.digest = hashlib.sha256()
        self.size = 0

    def write(self, data):
        self.digest.update(data)
        self.size += len(data)
        return self.sink.write(data)

    def flush(self):
        self.sink.flush()


def staging_root():
    root = Path(settings.STAGING_ROOT)
    root.mkdir(parents=True, exist_ok=True)
    return root


def staging_path(upload):
    return staging_root() / upload.staging_name


def new_staging_name():
    return f"upload-{uuid.uuid4().hex}.bin"


def _check_target(user, site, study, mode):
    require(user, Action.UPLOAD, site=site, study=study)
    if not site.studies.filter(pk=study.pk).exists():
        raise UploadError(f"site {site.slug} does not take part in study {study.slug}",
                          field="study")
    if mode not in UploadMode.values:
        raise UploadError(f"mode must be one of {', '.join(UploadMode.values)}, got {mode!r}",
                          field="mode")
    if mode == UploadMode.ADDITION and not DatasetVersion.objects.filter(
            site=site, study=study).exists():
        raise UploadError(
            f"site {site.slug} has no dataset version in {study.slug} to add to yet: send a "
            "full snapshot first", field="mode",
        )


def _queue(upload, *, user, token, via):
    """Record the complete upload and ask for its validation, in one transaction."""
    with transaction.atomic():
        upload.state = UploadState.QUEUED
        upload.save(update_fields=["state", "archive_sha256", "archive_bytes", "staging_name",
                                   "received", "expected_bytes"])
        record(
            "upload.received", actor=user, token=token, site=upload.site, study=upload.study,
            target=upload, summary=f"{upload.label} ({upload.archive_bytes} bytes) received "
            f"via {via}", params={"mode": upload.mode, "via": via},
            inputs=[{"name": upload.label, "sha256": upload.archive_sha256,
                     "bytes": upload.archive_bytes}],
        )
        enqueue("upload.validate", target=upload, site=upload.site, study=upload.study,
                created_by=user)
    return upload


def submit_path(source, *, site, study, user, mode=UploadMode.SNAPSHOT, via="command",
                token=None):
    """Stage a folder or a .zip/.tar(.gz) file and queue its validation. Returns the Upload."""
    source = Path(source)
    _check_target(user, site, study, mode)
    name = new_staging_name()
    target = staging_root() / name
    try:
        with open(target, "wb") as raw:
            sink = _HashingWriter(raw)
            if source.is_dir():
                pack_folder(source, sink)
            elif source.is_file():
                with open(source, "rb") as stream:
                    while chunk := stream.read(CHUNK_BYTES):
                        sink.write(chunk)
            else:
                raise UploadError(f"{source}: no such file or folder", field="path")
            raw.flush()
            os.fsync(raw.fileno())
    except ArchiveError as exc:
        target.unlink(missing_ok=True)
        raise UploadError(str(exc), field="path") from None
    except BaseException:
        target.unlink(missing_ok=True)
        raise
    upload = Upload(
        site=site, study=study, mode=mode, source=via, label=source.name or str(source),
        staging_name=name, archive_sha256=sink.digest.hexdigest(), archive_bytes=sink.size,
        expected_bytes=sink.size, received=[[0, sink.size]], created_by=user,
    )
    upload.save()
    return _queue(upload, user=user, token=token, via=via)


def submit_staged(staged, *, label, sha256, size, site, study, user, mode, via, token=None):
    """Queue an archive that already sits in staging (written and hashed by the web form)."""
    _check_target(user, site, study, mode)
    staged = Path(staged)
    if staged.parent != staging_root():
        raise ValueError("staged archive must lie in the staging folder")
    upload = Upload(
        site=site, study=study, mode=mode, source=via, label=label, staging_name=staged.name,
        archive_sha256=sha256, archive_bytes=size, expected_bytes=size, received=[[0, size]],
        created_by=user,
    )
    upload.save()
    return _queue(upload, user=user, token=token, via=via)


def safe_relative_path(text):
    """A browser-sent relative path, checked like an archive member; raises UploadError."""
    posix = PurePosixPath(text.replace("\\", "/"))
    if not text or posix.is_absolute() or any(p in ("..", "") for p in posix.parts) or \
            ":" in posix.parts[0] or "\x00" in text:
        raise UploadError(f"{text!r}: not a relative path inside the dataset", field="paths")
    return posix


def pack_staged_files(pieces):
    """Pack (relative path, staged piece) pairs into one staged tar; returns (path, sha, size).

    The pieces are removed once packed. A folder chosen in the browser arrives with its own
    name as the first path part; it is kept, and validation strips a single top folder.
    """
    name = new_staging_name()
    target = staging_root() / name
    seen = set()
    try:
        with open(target, "wb") as raw:
            sink = _HashingWriter(raw)
            with tarfile.open(fileobj=sink, mode="w|", format=tarfile.PAX_FORMAT) as tar:
                for relative, piece in pieces:
                    key = relative.as_posix().casefold()
                    if key in seen:
                        raise UploadError(f"{relative}: sent twice", field="paths")
                    seen.add(key)
                    info = tarfile.TarInfo(relative.as_posix())
                    info.size = Path(piece).stat().st_size
                    info.mtime = 0
                    with open(piece, "rb") as stream:
                        tar.addfile(info, stream)
    except BaseException:
        target.unlink(missing_ok=True)
        raise
    finally:
        for _, piece in pieces:
            Path(piece).unlink(missing_ok=True)
    return target, sink.digest.hexdigest(), sink.size


# --- resumable uploads in chunks (the API) -------------------------------------------------

#: Upload states whose archive still sits in staging and counts against the site's quota.
STAGED_STATES = (UploadState.RECEIVING, UploadState.QUEUED, UploadState.VALIDATING)

def staged_bytes(site):
    """Bytes of ``site``'s uploads still in staging: announced sizes of those receiving,
    archive sizes of those waiting or being validated."""
    total = 0
    for state, announced, archive in Upload.objects.filter(
            site=site, state__in=STAGED_STATES).values_list(
            "state", "expected_bytes", "archive_bytes"):
        total += (announced or 0) if state == UploadState.RECEIVING else archive
    return total


def start_chunked(*, site, study, user, mode, label, expected_bytes, token=None):
    """Open an upload that will arrive in chunks; returns the Upload in state 'receiving'."""
    _check_target(user, site, study, mode)
    if isinstance(expected_bytes, bool) or not isinstance(expected_bytes, int) \
            or expected_bytes <= 0:
        raise UploadError(f"size must be the archive's length in bytes (a whole number > 0), "
                          f"got {expected_bytes!r}", field="size")
    limit = settings.UPLOAD_MAX_BYTES
    if expected_bytes > limit:
        raise UploadError(f"size {expected_bytes} bytes is above the limit of {limit} bytes",
                          field="size")
    name = new_staging_name()
    with transaction.atomic():
        Site.objects.select_for_update().filter(pk=site.pk).first()  # one quota check at a time
        in_use = staged_bytes(site)
        quota = settings.SITE_STAGING_QUOTA_BYTES
        if in_use + expected_bytes > quota:
            raise UploadError(
                f"site {site.slug} already has {in_use} bytes in uploads still receiving, "
                f"waiting or being validated; {expected_bytes} more would pass its staging "
                f"quota of {quota} bytes. Finish or wait for those uploads, or ask an operator "
                "to raise CAIRN_SITE_STAGING_QUOTA_BYTES", field="size",
            )
        upload = Upload.objects.create(
            site=site, study=study, mode=mode, source="api", label=label[:200],
            staging_name=name, expected_bytes=expected_bytes, created_by=user,
        )
        record("upload.started", actor=user, token=token, site=site, study=study,
               target=upload, summary=f"{label} ({expected_bytes} bytes) announced",
               params={"mode": mode, "expected_bytes": expected_bytes})
        (staging_root() / name).touch()
    return upload


def merge_ranges(ranges, start, end):
    """Add [start, end) to a sorted list of disjoint ranges, merging neighbours."""
    merged = []
    for a, b in sorted([*ranges, [start, end]]):
        if merged and a <= merged[-1][1]:
            merged[-1][1] = max(merged[-1][1], b)
        else:
            merged.append([a, b])
    return merged


def _check_chunk(upload, offset, length):
    if upload.state != UploadState.RECEIVING:
        raise UploadError(f"upload {upload.pk} is {upload.get_state_display()}: it takes no "
                          "more chunks", field="state")
    if offset + length > upload.expected_bytes:
        raise UploadError(
            f"chunk ends at byte {offset + length}, past the announced size "
            f"{upload.expected_bytes}", field="offset",
        )


def _copy(source, sink, length):
    """Copy up to ``length`` bytes from ``source`` to ``sink`` in pieces; returns the count."""
    copied = 0
    while copied < length:
        data = source.read(min(CHUNK_BYTES, length - copied))
        if not data:
            break
        sink.write(data)
        copied += len(data)
    return copied


def write_chunk(upload_id, *, offset, stream, length):
    """Write ``length`` bytes from ``stream`` at ``offset``. Repeated chunks overwrite the same
    bytes; chunks may come in any order. Returns the upload with its received ranges.

    The body is received into a piece file of its own with no transaction open, however slow
    the sender; then a short transaction locks the upload, checks it still takes chunks, copies
    the piece into the archive and records the range.
    """
    if offset < 0 or length < 0:
        raise UploadError("offset and length must not be negative", field="offset")
    upload = Upload.objects.get(pk=upload_id)
    _check_chunk(upload, offset, length)
    piece = staging_root() / f"{upload.staging_name}.chunk-{uuid.uuid4().hex}"
    try:
        with open(piece, "w+b") as held:
            written = _copy(stream, held, length)
            if written != length:
                raise UploadError(f"chunk at offset {offset} ended after {written} of {length} "
                                  "bytes; send it again", field="length")
            held.flush()
            with transaction.atomic():
                upload = Upload.objects.select_for_update().get(pk=upload_id)
                _check_chunk(upload, offset, length)
                held.seek(0)
                with open(staging_path(upload), "r+b") as sink:
                    sink.seek(offset)
                    _copy(held, sink, length)
                upload.received = merge_ranges(upload.received, offset, offset + length)
                upload.last_chunk_at = timezone.now()
                upload.save(update_fields=["received", "last_chunk_at"])
    except OSError as exc:
        if exc.errno in FULL_ERRNOS:
            raise UploadError(
                f"the server's staging space is full; the chunk at offset {offset} was not "
                "kept. Ask an operator to free space, then send it again", field="storage",
            ) from exc
        raise
    finally:
        piece.unlink(missing_ok=True)
    return upload


def missing_ranges(upload):
    """Byte ranges still to send, as [start, end) pairs."""
    gaps, position = [], 0
    for start, end in upload.received:
        if start > position:
            gaps.append([position, start])
        position = max(position, end)
    if position < upload.expected_bytes:
        gaps.append([position, upload.expected_bytes])
    return gaps


def finish_chunked(upload_id, *, sha256, user, token=None):
    """Check that every byte arrived and the client's sha256 matches, then queue validation.

    A wrong checksum ends the upload (its staged bytes are removed): send it again.
    """
    with transaction.atomic():
        upload = Upload.objects.select_for_update().get(pk=upload_id)
        if upload.state != UploadState.RECEIVING:
            raise UploadError(f"upload {upload.pk} is already {upload.get_state_display()}",
                              field="state")
        gaps = missing_ranges(upload)
        if gaps:
            raise UploadError(f"bytes still missing: {gaps[:5]}; send those chunks, then "
                              "finish again", field="received")
        digest = hashlib.sha256()
        with open(staging_path(upload), "rb") as stream:
            while chunk := stream.read(CHUNK_BYTES):
                digest.update(chunk)
        found = digest.hexdigest()
        if (sha256 or "").lower() != found:
            upload.state = UploadState.REJECTED
            upload.finished_at = timezone.now()
            upload.errors = [{
                "path": upload.label, "line": None, "field": "sha256",
                "message": f"checksum mismatch: the client said {sha256!r}, the bytes received "
                           f"hash to {found}; the upload was dropped, send it again",
            }]
            upload.save(update_fields=["state", "finished_at", "errors"])
            record("upload.rejected", actor=user, token=token, site=upload.site,
                   study=upload.study, target=upload, summary="checksum mismatch",
                   params={"claimed": sha256, "found": found})
            transaction.on_commit(lambda: staging_path(upload).unlink(missing_ok=True))
            return upload
        upload.archive_sha256 = found
        upload.archive_bytes = upload.expected_bytes
    return _queue(upload, user=user, token=token, via="api")


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


def discard_staging_on_commit(upload):
    path = staging_path(upload)
    transaction.on_commit(lambda: path.unlink(missing_ok=True))


def temporary_dir(job=None, token=""):
    """A work folder beside staging (same disk, so moves are cheap); caller removes it.

    Its name carries the job and claim token that use it, so ``collect_blobs`` can tell the
    folder of a running validation from one a killed worker left behind.
    """
    owner = f"job{job.pk}-{token}-" if job is not None and token else ""
    return tempfile.TemporaryDirectory(prefix=f"work-{owner}", dir=staging_root())


# --- uploads that could not be checked ------------------------------------------------------

def _next_step(cause, job_id):
    if cause == "error":
        return "Send the dataset again once the problem above is dealt with."
    what = {
        "lost": "its worker stopped each time (crash, out of memory or restart)",
        "transient": "the database could not be reached reliably",
    }.get(cause, "this is a fault in Cairn, not in your data")
    return f"Ask an operator to look at job {job_id} ({what}); then send the dataset again."


def _mark_failed(upload, *, failure, next_step, params):
    upload.state = UploadState.FAILED
    upload.failure = failure
    upload.next_step = next_step[:300]
    upload.finished_at = timezone.now()
    upload.save(update_fields=["state", "failure", "next_step", "finished_at"])
    record("upload.failed", target=upload, site=upload.site, study=upload.study, worker=True,
           summary=f"upload {upload.pk} failed: {failure[:200]}", params=params,
           inputs=[{"upload": upload.pk, "sha256": upload.archive_sha256}])


def validation_failed(job, cause):
    """Failure hook of the upload.validate job (``portal.jobs.kinds``): its upload ends
    "failed" with the job's message and a next step. Runs inside the transaction that fails
    the job; does nothing to an upload already accepted, rejected or failed. The staged
    archive stays until ``collect_blobs`` removes it after its grace period."""
    if job.target_type != "datasets.upload":
        return False
    with transaction.atomic():
        upload = Upload.objects.select_for_update().select_related("site", "study").filter(
            pk=job.target_id).first()
        if upload is None or upload.is_final:
            return False
        _mark_failed(upload, failure=job.error, next_step=_next_step(cause, job.pk),
                     params={"job": job.pk, "cause": cause})
    return True


def expire_abandoned(now=None, *, dry_run=False):
    """Fail resumable uploads that received no chunk for ``UPLOAD_ABANDONED_AFTER_S`` and
    remove their staged bytes. Returns, for each upload ended (or that would be), its id, its
    staging file and that file's bytes."""
    now = now or timezone.now()
    after_s = settings.UPLOAD_ABANDONED_AFTER_S
    cutoff = now - timedelta(seconds=after_s)
    stale = Upload.objects.filter(state=UploadState.RECEIVING).filter(
        Q(last_chunk_at__lt=cutoff) | Q(last_chunk_at__isnull=True, created_at__lt=cutoff))
    ended = []
    for upload_id in stale.values_list("pk", flat=True):
        with transaction.atomic():
            upload = Upload.objects.select_for_update().select_related("site", "study").get(
                pk=upload_id)
            last = upload.last_chunk_at or upload.created_at
            if upload.state != UploadState.RECEIVING or last >= cutoff:
                continue  # a chunk arrived meanwhile
            path = staging_path(upload)
            ended.append({"upload": upload.pk, "staging": upload.staging_name,
                          "bytes": path.stat().st_size if path.exists() else 0})
            if dry_run:
                continue
            _mark_failed(
                upload, failure=f"abandoned: no chunk for {after_s / 3600:g} hours; start again",
                next_step="Start the upload again: announce it anew and send all its chunks.",
                params={"abandoned_after_s": after_s, "received": upload.received},
            )
            discard_staging_on_commit(upload)
    return ended
