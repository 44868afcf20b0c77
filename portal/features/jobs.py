"""Feature sets as jobs: a coordinating job fans out one job per recording not computed yet;
the last recording to finish queues the combining job, which writes the table and its sidecar.
"""

import json

from django.utils import timezone

from cairn_science.features.pipeline import INDEX_COLUMNS, LABEL_COLUMNS, ORIGIN_COLUMNS
from portal.audit.events import record
from portal.datasets import blobs
from portal.features.models import FeatureSet, FeatureSetItem, FeatureSetState, RecordingFeatures
from portal.jobs.services import enqueue

CAUTION = ("Research use only: not a medical device and not for decisions about a person's "
           "fitness for duty. Participant data: handle under your ethics approval and "
           "data-protection rules.")


def _find_part(feature_set, item):
    return RecordingFeatures.objects.filter(
        input_digest=item.input_digest, params_digest=feature_set.params_digest,
        code_version=feature_set.code_version).first()


def _queue_combine_if_complete(feature_set):
    """Inside a transaction holding the set's row lock: queue the combining job once."""
    if feature_set.items.filter(part__isnull=True).exists():
        return False
    if FeatureSet.objects.filter(pk=feature_set.pk, combine_queued=False).update(
            combine_queued=True) != 1:
        return False
    enqueue("features.combine", target=feature_set, study=feature_set.study,
            params={"feature_set": feature_set.pk})
    return True


def run_set(ctx):
    feature_set = FeatureSet.objects.select_related("study").get(pk=ctx.job.target_id)
    items = list(feature_set.items.select_related("recording__version__site"))
    with ctx.finish() as job:
        FeatureSet.objects.select_for_update().filter(pk=feature_set.pk).first()
        reused = queued = 0
        for item in items:
            if item.part_id is not None:
                continue
            part = _find_part(feature_set, item)
            if part is not None:
                item.part = part
                item.save(update_fields=["part"])
                reused += 1
                continue
            enqueue("features.recording", target=item.recording,
                    site=item.recording.version.site, study=feature_set.study,
                    params={"feature_set": feature_set.pk, "item": item.pk})
            queued += 1
        combining = _queue_combine_if_complete(feature_set)
        job.result = {"queued": queued, "reused": reused, "combining": combining}


def compute_part(feature_set, item):
    """(result, Parquet bytes or None when the recording is left out) of one recording of
    a feature set, computed from its recorded inputs and the set's parameters."""
    import mne

    from cairn_science.features.pipeline import part_to_parquet, recording_part
    from portal.quality.jobs import materialised, read_raw

    recording = item.recording
    with materialised(recording) as root:
        raw = read_raw(root, recording)
    picks = mne.pick_types(raw.info, eeg=True, exclude=[])
    ch_names = [raw.ch_names[i] for i in picks]
    result = recording_part(raw.get_data(picks=picks), sfreq_hz=raw.info["sfreq"],
                            ch_names=ch_names, inputs=item.inputs, params=feature_set.params)
    return result, (None if result.excluded_reason else part_to_parquet(result))


def run_recording(ctx):
    feature_set = FeatureSet.objects.select_related("study").get(pk=ctx.params["feature_set"])
    item = FeatureSetItem.objects.select_related("recording__version__site").get(
        pk=ctx.params["item"])
    recording = item.recording
    part = _find_part(feature_set, item)
    if part is None:
        ctx.progress(0, 3, "reading, filtering and computing features")
        result, part_bytes = compute_part(feature_set, item)
        table_sha = ""
        if part_bytes is not None:
            table_sha, _ = blobs.put_bytes(part_bytes)
        ctx.progress(2, 3, "storing")
        defaults = {
            "site": recording.version.site, "recording_sha256": recording.sha256,
            "table_sha256": table_sha, "n_windows": int(result.window_start_s.size),
            "window_counts": result.window_counts, "channel_status": result.channel_status,
            "steps": result.steps, "excluded_reason": result.excluded_reason,
        }
    with ctx.finish() as job:
        FeatureSet.objects.select_for_update().filter(pk=feature_set.pk).first()
        if part is None:
            part, _ = RecordingFeatures.objects.get_or_create(
                input_digest=item.input_digest, params_digest=feature_set.params_digest,
                code_version=feature_set.code_version, defaults=defaults)
        FeatureSetItem.objects.filter(pk=item.pk).update(part=part)
        combining = _queue_combine_if_complete(feature_set)
        job.result = {"part": part.pk, "windows": part.n_windows,
                      "excluded": part.excluded_reason or None, "combining": combining}


def build_table(feature_set, part_frames=None):
    """The whole table (pandas) and the column descriptions, from the stored parts, or
    from ``part_frames`` ({item id: frame or None}) computed again."""
    import numpy as np
    import pandas as pd

    from cairn_science.features import FeatureRequest, describe_columns
    from cairn_science.features.pipeline import read_parquet

    items = list(feature_set.items.select_related(
        "part", "recording__participant", "recording__version__site").prefetch_related(
        "recording__blocks").order_by("recording__version__site__slug", "recording__path"))
    request = FeatureRequest.from_dict(feature_set.params["features"])
    frames, feature_names = [], []
    for item in items:
        part = item.part
        if part_frames is not None:
            frame = part_frames[item.pk]
            if frame is None:
                continue
        else:
            if part.excluded_reason or not part.table_sha256:
                continue
            with blobs.open_blob(part.table_sha256) as fh:
                frame = read_parquet(fh)
        recording = item.recording
        blocks = item.inputs["blocks"]
        block_index = frame.pop("block").to_numpy()

        def pick(key, idx=block_index, blocks=blocks):
            return [blocks[i][key] if i >= 0 else None for i in idx]

        head = pd.DataFrame({
            "site": recording.version.site.slug, "participant": recording.participant.label,
            "session": recording.session, "task": recording.task, "run": recording.run,
            "window_start_s": frame.pop("window_start_s").to_numpy(),
            "rating": pd.array(pick("rating"), dtype="Int64"),
            "level": pick("level"), "condition": pick("condition"),
            "recording": recording.path, "acquisition": recording.acquisition,
            "block_onset_s": pick("onset_s"), "qc_verdict": item.inputs["qc"]["verdict"],
        })
        for name in frame.columns:
            if name not in feature_names:
                feature_names.append(name)
        frames.append(pd.concat([head, frame], axis=1))
    index_cols = list(INDEX_COLUMNS + LABEL_COLUMNS + ORIGIN_COLUMNS)
    if frames:
        table = pd.concat(frames, ignore_index=True)
        table = table.reindex(columns=index_cols + feature_names)
        table[feature_names] = table[feature_names].astype(np.float64)
    else:
        table = pd.DataFrame(columns=index_cols)
    if feature_set.params["preprocessing"]["channels"] is not None:
        channels = feature_set.params["preprocessing"]["channels"]
    else:
        channels = []
        for item in items:
            for name in (item.part.channel_status if item.part else {}):
                if name not in channels:
                    channels.append(name)
    described = {c["name"]: c for c in describe_columns(request, channels)}
    return table, [described[n] for n in feature_names if n in described], items


COLUMN_WORDS = {
    "site": "site that recorded the data (slug)",
    "participant": "participant label within the site (BIDS sub-)",
    "session": "BIDS session", "task": "BIDS task", "run": "BIDS run",
    "window_start_s": "start of the window from the start of the recording (s)",
    "rating": "raw workload rating of the block the window lies in",
    "level": "workload level the rating falls in (study's rating scale)",
    "condition": "condition of the block (e.g. rest or a difficulty)",
    "recording": "path of the recording in its dataset version",
    "acquisition": "BIDS acquisition", "block_onset_s": "start of the window's block (s)",
    "qc_verdict": "verdict of the recording's quality checks",
}


def sidecar(feature_set, feature_columns):
    columns = {name: {"kind": "index" if name in INDEX_COLUMNS else (
        "label" if name in LABEL_COLUMNS else "origin"), "description": words,
        "unit": "s" if name.endswith("_s") else None}
        for name, words in COLUMN_WORDS.items()}
    for column in feature_columns:
        columns[column["name"]] = {"kind": "feature", **{k: v for k, v in column.items()
                                                           if k != "name"}}
    return {
        "feature_set": feature_set.pk, "study": feature_set.study.slug,
        "code_version": feature_set.code_version, "parameters": feature_set.params,
        "key_sha256": feature_set.key_sha256, "columns": columns, "caution": CAUTION,
    }


def run_combine(ctx):
    from cairn_science.features.pipeline import frame_to_parquet
    from cairn_science.features.site_effects import site_effects

    feature_set = FeatureSet.objects.select_related("study").get(pk=ctx.job.target_id)
    if feature_set.state == FeatureSetState.DONE:
        with ctx.finish() as job:
            job.result = {"already": True}
        return
    ctx.progress(0, 3, "joining the recordings' parts")
    table, feature_columns, items = build_table(feature_set)
    ctx.progress(1, 3, "looking for site effects")
    names = [c["name"] for c in feature_columns]
    effects = site_effects(table[names].to_numpy(dtype=float) if names else [[]],
                           sites=table["site"].to_numpy(), columns=names,
                           participants=table["participant"].to_numpy()) if len(table) else {
        "applies": False, "why": "no windows"}
    ctx.progress(2, 3, "storing the table")
    table_sha, table_bytes = blobs.put_bytes(frame_to_parquet(table))
    meta = json.dumps(sidecar(feature_set, feature_columns), indent=2, sort_keys=True,
                      ensure_ascii=False).encode()
    sidecar_sha, _ = blobs.put_bytes(meta)
    with ctx.finish() as job:
        FeatureSet.objects.filter(pk=feature_set.pk).update(
            state=FeatureSetState.DONE, table_sha256=table_sha, table_bytes=table_bytes,
            sidecar_sha256=sidecar_sha, n_rows=len(table), n_columns=len(table.columns),
            site_effects=effects, finished_at=timezone.now(), error="")
        job.result = {"rows": len(table), "columns": len(table.columns), "table": table_sha}
        excluded = [i.recording.path for i in items if i.part and i.part.excluded_reason]
        record("features.created", target=feature_set, study=feature_set.study, worker=True,
               summary=f"feature set {feature_set.pk}: {len(table)} windows × "
                       f"{len(names)} features from {len(items) - len(excluded)} recordings"
                       + (f" ({len(excluded)} left out)" if excluded else ""),
               params={"params_digest": feature_set.params_digest,
                       "code_version": feature_set.code_version},
               inputs=[{"qc_run": i.qc_run_id, "recording_sha256": i.recording.sha256,
                        "part": i.part_id, "part_sha256": i.part.table_sha256 if i.part else ""}
                       for i in items],
               outputs=[{"feature_set": feature_set.pk, "table_sha256": table_sha,
                         "sidecar_sha256": sidecar_sha}])
