"""Validating an upload and, if it passes, indexing it as a new dataset version.

Nothing is stored for a rejected upload except its report. For an accepted one, files become
blobs first (content-addressed, so a crash leaves only unreferenced blobs that the collector
removes) and every database row of the new version is written in one transaction.
"""

import os
import shutil
import time
from dataclasses import asdict
from pathlib import Path

from django.db import connection
from django.db.models import Max

from cairn_science.archive import ArchiveError, extract_archive, list_files
from portal.audit.events import record
from portal.datasets import blobs
from portal.datasets.blobs import StorageFull, storage_errors
from portal.datasets.manifest import file_diff as _diff
from portal.datasets.manifest import manifest_sha256 as _manifest_sha
from portal.datasets.models import (
    Block,
    DatasetVersion,
    Participant,
    Recording,
    Upload,
    UploadMode,
    UploadState,
    VersionFile,
)
from portal.datasets.services import (
    discard_staging_on_commit,
    finish_upload,
    hold_for_confirmation,
    mark_untouched,
    mark_validating,
    pending_removals,
    snapshot_hints,
    snapshot_warning,
    staging_path,
    temporary_dir,
)
from portal.jobs.services import JobError
from portal.quality.services import start_round
from portal.studies.models import current_protocol


def _problem(path, message, field=None):
    return {"path": path, "line": None, "field": field, "message": message}


def _latest_version(upload):
    return (DatasetVersion.objects.filter(site=upload.site, study=upload.study)
            .order_by("-number").first())


def _materialise(version, root):
    """Write a stored version's files into ``root`` (for validating an addition on top)."""
    for item in version.files.all():
        blobs.copy_blob_to(item.sha256, root / item.path)


def _known_recordings(site, study):
    """Earlier index entries by data-file hash, so unchanged recordings are not read again."""
    known = {}
    for rec in Recording.objects.filter(version__site=site, version__study=study):
        known[rec.sha256] = {
            "sha256": rec.sha256, "sfreq_hz": rec.sfreq_hz, "n_channels": rec.n_channels,
            "channel_names": rec.channel_names, "duration_s": rec.duration_s,
            "power_line_hz": rec.power_line_hz,
        }
    return known


def _identity(path):
    """What tells that a file is untouched since it was hashed: same inode, size and mtime."""
    info = os.stat(path)
    return info.st_ino, info.st_size, info.st_mtime_ns


def validate_upload(ctx):
    upload = Upload.objects.select_related("site", "study").get(pk=ctx.job.target_id)
    if upload.is_final:
        with ctx.finish() as job:
            job.result = {"already": upload.state}
        return
    mark_validating(upload)
    protocol = current_protocol(upload.study).data
    archive = staging_path(upload)
    if not archive.exists():
        raise JobError(
            f"the archive of upload {upload.pk} is no longer in staging (removed or lost); "
            "send the dataset again"
        )
    parent = _latest_version(upload)
    try:
        files, originals, scrubbed, result = _check_and_store(ctx, upload, archive, parent,
                                                              protocol)
    except StorageFull as exc:
        raise JobError(
            f"storage full: upload {upload.pk} ({upload.label}) could not be stored ({exc.reason} "
            f"while {exc.what}); no dataset version was written. Ask an operator to free space "
            "on the server, then send the dataset again"
        ) from exc
    if files is None and result.get("removals"):
        with ctx.finish() as job:
            hold_for_confirmation(upload, result["removals"], result["warnings"])
            job.result = {"held": True, "removals": result["removals"]["files"]}
        return None
    if files is None:
        return _reject(ctx, upload, snapshot_hints(upload, parent, result["errors"]),
                       result["warnings"])
    parent_files = {f.path: (f.sha256, f.bytes) for f in parent.files.all()} if parent else {}
    _accept(ctx, upload, parent, parent_files, files, originals, scrubbed, result)


class FoundSoFar:
    """Progress of the check, and the problems and warnings found so far written to the
    upload while it is validating (at most every ``every_s`` seconds), so that its live page
    shows them as they arrive; the final report replaces them."""

    def __init__(self, ctx, upload, every_s=2.0):
        from cairn_science.bids.report import Report

        self.ctx, self.upload, self.every_s = ctx, upload, every_s
        self.report = Report()
        self.written = (0, 0)
        self.last = 0.0

    def on_file(self, done, total):
        self.ctx.progress(done, total + 1, f"checked {done} of {total} recordings")
        counts = (len(self.report.errors), len(self.report.warnings))
        now = time.monotonic()
        if counts != self.written and (now - self.last >= self.every_s or done == total):
            Upload.objects.filter(pk=self.upload.pk, state=UploadState.VALIDATING).update(
                errors=[asdict(p) for p in self.report.errors],
                warnings=[asdict(p) for p in self.report.warnings])
            self.written, self.last = counts, now


def _check_and_store(ctx, upload, archive, parent, protocol):
    """Unpack and check the upload in a work folder; if it passes, move its files into the blob
    store. Returns (files, originals, scrubbed, report); files is None when it is rejected."""
    from cairn_science.bids.validate import validate_dataset

    with temporary_dir(ctx.job, ctx.token) as tmp:
        tmp = Path(tmp)
        root = tmp / "dataset"
        incoming = tmp / "incoming"
        hashed = {}  # relative path: sha256 computed as the file was unpacked
        # Files with the same content are unpacked as hard links to one file, unless
        # scrubbing will rewrite files in place.
        scrub = protocol.get("deidentification") == "scrub"
        with storage_errors("unpacking the upload in staging"):
            try:
                extract_archive(archive, incoming, label=upload.label, digests=hashed,
                                link_duplicates=not scrub)
            except ArchiveError as exc:
                return None, {}, [], {"errors": [_problem(upload.label, str(exc), "archive")],
                                      "warnings": []}
            hashed = {relative: (sha256, _identity(incoming / relative))
                      for relative, sha256 in hashed.items()}
            untouched = set()
            if upload.mode == UploadMode.ADDITION and parent is not None:
                root.mkdir()
                _materialise(parent, root)
                sent = list_files(incoming)
                untouched = set(parent.files.values_list("path", flat=True)) - set(sent)
                for relative in sent:
                    target = root / relative
                    target.parent.mkdir(parents=True, exist_ok=True)
                    shutil.move(str(incoming / relative), target)
            else:
                incoming.rename(root)
        ctx.progress(0, 1, "checking the dataset")
        so_far = FoundSoFar(ctx, upload)
        report = validate_dataset(
            root,
            ratings={
                "source": protocol.get("ratings", {}).get("source", "scans"),
                "table": protocol.get("ratings", {}).get("table", ""),
                "column": protocol["rating_scale"]["column"],
                "condition_column": protocol["condition_column"],
            },
            scale=protocol["rating_scale"],
            deid=protocol.get("deidentification", "refuse"),
            known=_known_recordings(upload.site, upload.study),
            on_file=so_far.on_file, report=so_far.report,
        )
        result = report.as_dict()
        result["warnings"] = mark_untouched(result["warnings"], untouched)
        if not report.ok:
            if upload.mode == UploadMode.SNAPSHOT:
                result["warnings"][:0] = snapshot_warning(parent, list_files(root))
            return None, {}, [], result
        confirmed_on = (upload.pending_removals or {}).get("parent")
        if not upload.allow_removals or (confirmed_on and parent is not None
                                         and confirmed_on != parent.pk):
            # A snapshot that drops anything waits for a yes; a yes given about another
            # version than the latest is asked again.
            removals = pending_removals(parent, list_files(root),
                                        {info["participant"] for info in result["recordings"]})
            if removals:
                return None, {}, [], dict(result, removals=removals)
        originals = {}
        scrubbed = []
        if scrub:
            from cairn_science.bids.deid import scrub_dataset

            for relative in list_files(root):
                originals[relative] = blobs.file_sha256(root / relative)
            scrubbed = scrub_dataset(root)
            hashed = {}  # scrubbing rewrote files: hash them again
        files = {}
        for relative in list_files(root):
            # A sent file still as it was unpacked is not read again for its hash; a file
            # materialised from the parent version, or one that changed, is.
            sha256, identity = hashed.get(relative, (None, None))
            if sha256 is not None and identity != _identity(root / relative):
                sha256 = None
            files[relative] = blobs.adopt_file(root / relative, sha256)
    return files, originals, scrubbed, result


def _accept(ctx, upload, parent, parent_files, files, originals, scrubbed, result):
    diff = _diff(parent_files, files)
    with ctx.finish() as job:
        number = (DatasetVersion.objects.filter(site=upload.site, study=upload.study)
                  .aggregate(n=Max("number"))["n"] or 0) + 1
        version = DatasetVersion.objects.create(
            site=upload.site, study=upload.study, number=number, upload=upload, parent=parent,
            manifest_sha256=_manifest_sha(files), diff=diff, n_files=len(files),
            total_bytes=sum(size for _, size in files.values()),
        )
        VersionFile.objects.bulk_create([
            VersionFile(version=version, path=path, sha256=sha, bytes=size,
                        original_sha256=originals.get(path, "") if scrubbed else "")
            for path, (sha, size) in sorted(files.items())
        ])
        labels = sorted({info["participant"] for info in result["recordings"]})
        participants = {}
        for label in labels:
            participants[label], _ = Participant.objects.get_or_create(site=upload.site,
                                                                      label=label)
        recordings = [
            Recording(
                version=version, participant=participants[info["participant"]],
                path=info["path"], sha256=files[info["path"]][0],
                session=info.get("session", ""), task=info.get("task", ""),
                acquisition=info.get("acquisition", "") or "", run=info.get("run", "") or "",
                sfreq_hz=info["sfreq_hz"], n_channels=info["n_channels"],
                channel_names=info.get("channel_names", []), duration_s=info["duration_s"],
                power_line_hz=info.get("power_line_hz"),
            )
            for info in result["recordings"]
        ]
        if connection.features.can_return_rows_from_bulk_insert:  # SQLite, PostgreSQL
            Recording.objects.bulk_create(recordings)  # sets each one's primary key
        else:
            for recording in recordings:
                recording.save()
        Block.objects.bulk_create([
            Block(recording=recording, onset_s=b["onset_s"], duration_s=b["duration_s"],
                  condition=b.get("condition") or "", rating=b.get("rating"),
                  level=b.get("level") or "")
            for recording, info in zip(recordings, result["recordings"], strict=True)
            for b in info.get("blocks", [])
        ])
        unchanged = {p for p in parent_files if files.get(p) == parent_files[p]}
        finish_upload(upload, errors=[], warnings=mark_untouched(result["warnings"], unchanged))
        discard_staging_on_commit(upload)
        start_round(version)
        job.result = {"dataset_version": version.pk, "recordings": len(result["recordings"]),
                      "files": len(files)}
        record(
            "upload.accepted", target=upload, site=upload.site, study=upload.study, worker=True,
            summary=f"upload {upload.pk} accepted with {len(result['warnings'])} warning(s)",
            inputs=[{"upload": upload.pk, "sha256": upload.archive_sha256}],
            params={"scrubbed": scrubbed} if scrubbed else {},
        )
        record(
            "dataset_version.created", target=version, site=upload.site, study=upload.study,
            worker=True, summary=f"{upload.site.slug} version {number}: "
            f"{len(result['recordings'])} recordings, {len(files)} files "
            f"(+{len(diff['added'])} −{len(diff['removed'])} ~{len(diff['changed'])})",
            inputs=[{"upload": upload.pk, "sha256": upload.archive_sha256}]
            + ([{"dataset_version": parent.pk, "manifest_sha256": parent.manifest_sha256}]
               if parent else []),
            outputs=[{"dataset_version": version.pk, "manifest_sha256": version.manifest_sha256}],
            params={"mode": upload.mode, "diff": {k: len(v) if isinstance(v, list) else v
                                                  for k, v in diff.items()}},
        )


def _reject(ctx, upload, errors, warnings):
    with ctx.finish() as job:
        finish_upload(upload, errors=errors, warnings=warnings)
        discard_staging_on_commit(upload)
        job.result = {"rejected": True, "errors": len(errors)}
        record(
            "upload.rejected", target=upload, site=upload.site, study=upload.study, worker=True,
            summary=f"upload {upload.pk} rejected: {len(errors)} error(s)",
            inputs=[{"upload": upload.pk, "sha256": upload.archive_sha256}],
            params={"first_error": errors[0]["message"][:200] if errors else ""},
        )
