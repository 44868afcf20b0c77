"""The one path every upload takes, whether it comes from the web, the API or a command.

Bytes are written to staging as they arrive and hashed on the way; nothing is read whole into
memory. The archive stays in staging until its validation job decides: accepted files become
content-addressed blobs, a rejected upload keeps only its report.
"""

import hashlib
import os
import re
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
from portal.jobs.models import Job
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
    # An addition to a site with no version yet is its first version: nothing to add to, and
    # nothing to remove either, so it is taken as it is.


def _queue(upload, *, user, token, via):
    """Record the complete upload and ask for its validation, in one transaction."""
    with transaction.atomic():
        upload.state = UploadState.QUEUED
        upload.save(update_fields=["state", "archive_sha256", "archive_bytes", "staging_name",
                                   "received", "expected_bytes"])
        record(
            "upload.received", actor=user, token=token, site=upload.site, study=upload.study,
            target=upload, summary=f"{upload.label} ({upload.archive_bytes} bytes) received "
            f"via {via}", params={"mode": upload.mode, "via": via,
                                  "allow_removals": upload.allow_removals},
            inputs=[{"name": upload.label, "sha256": upload.archive_sha256,
                     "bytes": upload.archive_bytes}],
        )
        enqueue("upload.validate", target=upload, site=upload.site, study=upload.study,
                created_by=user)
    return upload


def submit_path(source, *, site, study, user, mode=UploadMode.SNAPSHOT, via="command",
                token=None, allow_removals=False):
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
        allow_removals=bool(allow_removals),
    )
    upload.save()
    return _queue(upload, user=user, token=token, via=via)


def submit_staged(staged, *, label, sha256, size, site, study, user, mode, via, token=None,
                  allow_removals=False):
    """Queue an archive that already sits in staging (written and hashed by the web form)."""
    _check_target(user, site, study, mode)
    staged = Path(staged)
    if staged.parent != staging_root():
        raise ValueError("staged archive must lie in the staging folder")
    upload = Upload(
        site=site, study=study, mode=mode, source=via, label=label, staging_name=staged.name,
        archive_sha256=sha256, archive_bytes=size, expected_bytes=size, received=[[0, size]],
        created_by=user, allow_removals=bool(allow_removals),
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
STAGED_STATES = (UploadState.RECEIVING, UploadState.QUEUED, UploadState.VALIDATING,
                 UploadState.HELD)

def staged_bytes(site):
    """Bytes of ``site``'s uploads still in staging: announced sizes of those receiving,
    archive sizes of those waiting or being validated."""
    total = 0
    for state, announced, archive in Upload.objects.filter(
            site=site, state__in=STAGED_STATES).values_list(
            "state", "expected_bytes", "archive_bytes"):
        total += (announced or 0) if state == UploadState.RECEIVING else archive
    return total


def start_chunked(*, site, study, user, mode, label, expected_bytes, token=None,
                  allow_removals=False):
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
            allow_removals=bool(allow_removals),
        )
        record("upload.started", actor=user, token=token, site=site, study=study,
               target=upload, summary=f"{label} ({expected_bytes} bytes) announced",
               params={"mode": mode, "expected_bytes": expected_bytes,
                       "allow_removals": bool(allow_removals)})
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


# --- removals need a confirmation; earlier versions can be restored -------------------------

#: How many removed paths a "needs confirmation" report names.
FIRST_PATHS = 20


def _participants_of(version):
    if version is None:
        return set()
    return set(version.recordings.values_list("participant__label", flat=True).distinct())


def pending_removals(parent, paths, participants):
    """What making a version of ``paths`` (with recordings of ``participants``) would remove
    from ``parent``, or None when it removes nothing."""
    if parent is None:
        return None
    removed = sorted(set(parent.files.values_list("path", flat=True)) - set(paths))
    gone = sorted(_participants_of(parent) - set(participants))
    if not removed and not gone:
        return None
    return {
        "files": len(removed), "first_paths": removed[:FIRST_PATHS],
        "participants": gone,
        "parent": parent.pk, "parent_number": parent.number,
        "parent_manifest_sha256": parent.manifest_sha256,
    }


def removal_words(removals):
    """One sentence on what would be removed, for pages, errors and the command."""
    people = removals.get("participants") or []
    text = (f"{removals['files']} file{'s' if removals['files'] != 1 else ''} of version "
            f"{removals['parent_number']}")
    if people:
        shown = ", ".join(f"sub-{p}" for p in people[:10])
        more = f" and {len(people) - 10} more" if len(people) > 10 else ""
        text += (f" and {len(people)} participant{'s' if len(people) != 1 else ''} "
                 f"({shown}{more})")
    return text


def hold_for_confirmation(upload, removals, warnings):
    """The validation found that ``upload`` (a snapshot sent without allow_removals) would
    remove files or participants: it waits in state held, its archive kept in staging, and no
    version is written. Call inside the transaction that finishes the validation job."""
    upload.state = UploadState.HELD
    upload.pending_removals = removals
    upload.allow_removals = False
    upload.warnings = warnings
    upload.errors = []
    upload.save(update_fields=["state", "pending_removals", "allow_removals", "warnings",
                               "errors"])
    record("upload.held", target=upload, site=upload.site, study=upload.study, worker=True,
           summary=f"upload {upload.pk} would remove {removal_words(removals)}; "
                   "waiting for confirmation",
           inputs=[{"upload": upload.pk, "sha256": upload.archive_sha256},
                   {"dataset_version": removals["parent"],
                    "manifest_sha256": removals["parent_manifest_sha256"]}],
           params={"files": removals["files"], "participants": removals["participants"],
                   "first_paths": removals["first_paths"]})


def _held(upload_id):
    upload = Upload.objects.select_for_update().select_related("site", "study").get(
        pk=upload_id)
    if upload.state != UploadState.HELD:
        raise UploadError(f"upload {upload.pk} is {upload.get_state_display()}, not waiting "
                          "for a confirmation", field="state")
    return upload


def confirm_removals(upload_id, *, user, token=None):
    """The sender confirms the removals a held upload would make: it is validated again
    (against the latest version at that moment) and becomes a version if it still passes."""
    with transaction.atomic():
        upload = _held(upload_id)
        require(user, Action.UPLOAD, site=upload.site, study=upload.study)
        removals = upload.pending_removals
        upload.allow_removals = True
        upload.state = UploadState.QUEUED
        upload.save(update_fields=["allow_removals", "state"])
        record("upload.removals_confirmed", actor=user, token=token, target=upload,
               site=upload.site, study=upload.study,
               summary=f"removal of {removal_words(removals)} confirmed for upload "
                       f"{upload.pk}",
               params={"files": removals.get("files"),
                       "participants": removals.get("participants")},
               inputs=[{"upload": upload.pk, "sha256": upload.archive_sha256}])
        enqueue("upload.validate", target=upload, site=upload.site, study=upload.study,
                created_by=user)
    return upload


def cancel_held(upload_id, *, user, token=None):
    """The sender does not want the removals: the held upload ends rejected, nothing stored
    changes and its archive leaves staging."""
    with transaction.atomic():
        upload = _held(upload_id)
        require(user, Action.UPLOAD, site=upload.site, study=upload.study)
        upload.state = UploadState.REJECTED
        upload.finished_at = timezone.now()
        upload.errors = [{
            "path": upload.label, "line": None, "field": "allow_removals",
            "message": f"cancelled by {user.get_username()} instead of removing "
                       f"{removal_words(upload.pending_removals)}; nothing was changed. To "
                       "add to the dataset, send the new files as an addition",
        }]
        upload.save(update_fields=["state", "finished_at", "errors"])
        record("upload.cancelled", actor=user, token=token, target=upload, site=upload.site,
               study=upload.study, summary=f"upload {upload.pk} cancelled before its removals",
               inputs=[{"upload": upload.pk, "sha256": upload.archive_sha256}])
        discard_staging_on_commit(upload)
    return upload


def snapshot_hints(upload, parent, errors):
    """Errors of a snapshot that leaves out participants of ``parent`` say what to do
    instead of removing rows: send the files as an addition, which removes nobody."""
    if upload.mode != UploadMode.SNAPSHOT or parent is None:
        return errors
    known = _participants_of(parent)
    out = []
    for problem in errors:
        if problem.get("code") in ("participants.extra_subject",
                                   "ratings.unknown_participant"):
            found = re.search(r"sub-([A-Za-z0-9]+)", problem["message"])
            if found and found.group(1) in known:
                label = found.group(1)
                problem = dict(problem, message=(
                    f"sub-{label} is in version {parent.number} but this upload has no "
                    f"sub-{label}/ folder. It was sent as the whole dataset, which would "
                    f"remove sub-{label}: to add new data and keep everyone, send the same "
                    "files again as an addition (\"added to the latest version\"; "
                    "upload_bids --mode addition; API \"mode\": \"addition\"). Remove this "
                    f"row only if sub-{label} should leave the dataset"))
        out.append(problem)
    return out


def snapshot_warning(parent, paths):
    """For a rejected snapshot: a warning (as a list of 0 or 1) saying what it would remove
    once its problems are fixed, and that an addition removes nothing."""
    people = {p.split("/", 1)[0][4:] for p in paths if p.startswith("sub-") and "/" in p}
    removals = pending_removals(parent, paths, people)
    if not removals:
        return []
    return [{
        "path": "", "line": None, "field": "mode", "code": "upload.snapshot_removes",
        "message": f"this upload was sent as the whole dataset: once the problems are fixed it "
                   f"would remove {removal_words(removals)} (you would be asked to confirm). "
                   "To add these files to the dataset instead, send them as an addition",
    }]


def restore_version(source, *, user, token=None, allow_removals=False):
    """Make a new version of ``source``'s (site, study) holding exactly ``source``'s files and
    recordings. Nothing is copied but rows: the files' blobs are shared. Removing anything the
    latest version holds needs ``allow_removals``. Returns the new DatasetVersion."""
    from django.db.models import Max

    from portal.datasets.jobs import _diff
    from portal.datasets.models import Block, Recording, VersionFile
    from portal.quality.services import start_round

    require(user, Action.UPLOAD, site=source.site, study=source.study)
    with transaction.atomic():
        Site.objects.select_for_update().filter(pk=source.site_id).first()
        latest = (DatasetVersion.objects.filter(site=source.site_id, study=source.study_id)
                  .order_by("-number").first())
        if latest.pk == source.pk:
            raise UploadError(f"version {source.number} is already the latest", field="version")
        files = {f.path: (f.sha256, f.bytes, f.original_sha256) for f in source.files.all()}
        if latest.manifest_sha256 == source.manifest_sha256:
            raise UploadError(f"the latest version ({latest.number}) already holds exactly the "
                              f"files of version {source.number}", field="version")
        recordings = list(source.recordings.select_related("participant")
                          .prefetch_related("blocks"))
        removals = pending_removals(latest, files, {r.participant.label for r in recordings})
        if removals and not allow_removals:
            raise UploadError(
                f"restoring version {source.number} would remove {removal_words(removals)} "
                f"(first: {', '.join(removals['first_paths'][:5])}); confirm to go on "
                "(--allow-removals)", field="allow_removals")
        latest_files = {f.path: (f.sha256, f.bytes) for f in latest.files.all()}
        diff = _diff(latest_files, {p: (sha, size) for p, (sha, size, _) in files.items()})
        number = (DatasetVersion.objects.filter(site=source.site_id, study=source.study_id)
                  .aggregate(n=Max("number"))["n"] or 0) + 1
        now = timezone.now()
        upload = Upload.objects.create(
            site=source.site, study=source.study, mode=UploadMode.SNAPSHOT, source="restore",
            label=f"restore of version {source.number}", state=UploadState.ACCEPTED,
            created_by=user, finished_at=now, allow_removals=bool(removals),
        )
        version = DatasetVersion.objects.create(
            site=source.site, study=source.study, number=number, upload=upload, parent=latest,
            manifest_sha256=source.manifest_sha256, diff=diff, n_files=source.n_files,
            total_bytes=source.total_bytes,
        )
        VersionFile.objects.bulk_create([
            VersionFile(version=version, path=path, sha256=sha, bytes=size,
                        original_sha256=original)
            for path, (sha, size, original) in sorted(files.items())
        ])
        copies = Recording.objects.bulk_create([
            Recording(version=version, participant=r.participant, path=r.path, sha256=r.sha256,
                      session=r.session, task=r.task, acquisition=r.acquisition, run=r.run,
                      sfreq_hz=r.sfreq_hz, n_channels=r.n_channels,
                      channel_names=r.channel_names, duration_s=r.duration_s,
                      power_line_hz=r.power_line_hz)
            for r in recordings
        ])
        Block.objects.bulk_create([
            Block(recording=copy, onset_s=b.onset_s, duration_s=b.duration_s,
                  condition=b.condition, rating=b.rating, level=b.level)
            for r, copy in zip(recordings, copies, strict=True) for b in r.blocks.all()
        ])
        counts = {k: len(v) if isinstance(v, list) else v for k, v in diff.items()}
        record(
            "dataset_version.restored", actor=user, token=token, target=version,
            site=source.site, study=source.study,
            summary=f"{source.site.slug} version {number} restores version {source.number} "
                    f"(+{counts['added']} −{counts['removed']} ~{counts['changed']} against "
                    f"version {latest.number})",
            inputs=[{"dataset_version": source.pk, "number": source.number,
                     "manifest_sha256": source.manifest_sha256},
                    {"dataset_version": latest.pk, "number": latest.number,
                     "manifest_sha256": latest.manifest_sha256}],
            outputs=[{"dataset_version": version.pk, "number": number,
                      "manifest_sha256": version.manifest_sha256}],
            params={"restored_from": source.number, "replaced": latest.number,
                    "diff": counts, "removals_confirmed": bool(removals)},
        )
        start_round(version, user=user)
    return version


# --- the upload report: what this upload brought ---------------------------------------------

def mark_untouched(warnings, untouched):
    """Warnings about files this upload left as they were (``untouched`` paths) get
    ``"untouched": true``, so the report can fold them into one line."""
    return [dict(w, untouched=True) if w.get("path") in untouched else w for w in warnings]


def warning_report(warnings, *, examples=5):
    """(groups, untouched count): the warnings about what this upload brought, repeated ones
    (same kind of problem and field) grouped with their count, files and first message; the
    rest only counted."""
    shown = [w for w in warnings if not w.get("untouched")]
    groups = {}
    for problem in shown:
        key = (problem.get("code") or problem.get("message", ""), problem.get("field") or "")
        groups.setdefault(key, []).append(problem)
    out = []
    for (code, field), items in groups.items():
        paths = list(dict.fromkeys(p.get("path") or "(the upload)" for p in items))
        out.append({
            "code": code if items[0].get("code") else "", "field": field, "count": len(items),
            "message": items[0].get("message", ""), "path": items[0].get("path") or "",
            "line": items[0].get("line"), "paths": paths[:examples],
            "more_paths": max(0, len(paths) - examples), "items": items,
        })
    return out, len(warnings) - len(shown)


def upload_job(upload):
    """The validation job of ``upload`` (None before it is queued)."""
    return Job.objects.filter(target_type="datasets.upload", target_id=str(upload.pk)).first()
