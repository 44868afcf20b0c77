"""Computing a stored result again from its record, in a fresh worker, and comparing hashes.

A feature set is recomputed recording by recording from the inputs each item pinned (file,
quality result, overrides, blocks) and the set's parameters, never reusing a stored part,
and joined into a table whose sha256 is compared with the stored table's. A quality result
is computed again from the recording's files and the stored settings; its canonical JSON's
sha256 is compared with the stored result's.
"""

import hashlib
import io

from django.utils import timezone

from cairn_science.features.pipeline import frame_to_parquet, read_parquet
from portal.audit.events import canonical_sha256, record
from portal.datasets.models import Recording
from portal.features.jobs import build_table, compute_part
from portal.lineage.models import Reproduction
from portal.lineage.reproduce import subject_object
from portal.quality.jobs import compute_qc


def _features(feature_set, ctx):
    items = list(feature_set.items.select_related("part", "recording__version__site")
                 .order_by("recording__version__site__slug", "recording__path"))
    frames, parts = {}, []
    for done, item in enumerate(items):
        ctx.progress(done, len(items) + 1, f"computing {item.recording.path} again")
        _, part_bytes = compute_part(feature_set, item)
        new_sha = hashlib.sha256(part_bytes).hexdigest() if part_bytes is not None else ""
        frames[item.pk] = read_parquet(io.BytesIO(part_bytes)) if part_bytes else None
        stored = item.part.table_sha256 if item.part else ""
        parts.append({"recording": item.recording.path, "stored_sha256": stored,
                      "new_sha256": new_sha, "matches": stored == new_sha})
    ctx.progress(len(items), len(items) + 1, "joining the table")
    table, _, _ = build_table(feature_set, part_frames=frames)
    new = hashlib.sha256(frame_to_parquet(table)).hexdigest()
    different = [p for p in parts if not p["matches"]]
    return new, {"recordings": len(parts), "recordings_different": different[:50],
                 "n_different": len(different), "rows": len(table)}


def _quality(run, ctx):
    recording = (Recording.objects.filter(sha256=run.recording_sha256, version__site=run.site)
                 .select_related("version").order_by("id").first())
    if recording is None:
        raise ValueError(f"no recording with sha256 {run.recording_sha256} is stored any more")
    ctx.progress(0, 1, f"checking {recording.path} again")
    summary = compute_qc(recording, run.settings)
    new = canonical_sha256(summary)
    changed = sorted(key for key in set(summary) | set(run.result)
                     if canonical_sha256(summary.get(key)) != canonical_sha256(
                         run.result.get(key)))
    return new, {"recording": recording.path, "verdict": summary["verdict"],
                 "stored_verdict": run.verdict, "keys_different": changed}


def run_reproduce(ctx):
    reproduction = Reproduction.objects.get(pk=ctx.job.target_id)
    kind, obj = subject_object(reproduction.subject)
    try:
        if kind == "features":
            new, details = _features(obj, ctx)
        else:
            new, details = _quality(obj, ctx)
    except Exception as exc:
        Reproduction.objects.filter(pk=reproduction.pk).update(
            error=f"{type(exc).__name__}: {exc}"[:2000], finished_at=timezone.now())
        raise
    matches = new == reproduction.original_sha256
    with ctx.finish() as job:
        Reproduction.objects.filter(pk=reproduction.pk).update(
            new_sha256=new, matches=matches, details=details, finished_at=timezone.now())
        job.result = {"matches": matches, "new_sha256": new}
        site = getattr(obj, "site", None)
        record("reproduction.finished", target=reproduction, worker=True,
               study=getattr(obj, "study", None), site=site,
               summary=f"{reproduction.subject} computed again: "
                       + ("same hash" if matches else "hash differs"),
               params={"subject": reproduction.subject},
               inputs=[{"subject": reproduction.subject,
                        "sha256": reproduction.original_sha256}],
               outputs=[{"sha256": new, "matches": matches}])
