"""Quality checks as jobs: one job fans out per recording; each recording's job runs the checks
once per (file, settings, code version) and stores the result."""

import csv
from pathlib import PurePosixPath

from portal.audit.events import canonical_sha256, record
from portal.datasets.models import Recording
from portal.jobs.services import enqueue
from portal.quality.models import QCChannel, QCRound, QCRun
from portal.quality.reading import materialised, recording_files  # noqa: F401 (shared)
from portal.quality.sensors import sensor_positions
from portal.quality.services import refresh_decided, runs_of


def run_version(ctx):
    """Queue the checks of every recording of the round's version not checked yet."""
    qc_round = QCRound.objects.select_related("version__site", "version__study").get(
        pk=ctx.job.target_id)
    done = runs_of(qc_round)
    with ctx.finish() as job:
        queued = 0
        for recording in qc_round.version.recordings.all():
            if recording.sha256 in done:
                continue
            enqueue("qc.recording", target=recording, site=qc_round.version.site,
                    study=qc_round.version.study, params={"round": qc_round.pk})
            queued += 1
        job.result = {"queued": queued, "reused": len(done)}


def site_status(channels_tsv):
    """{channel: ("bad", description)} for channels the site marked bad in channels.tsv."""
    marked = {}
    if not channels_tsv.exists():
        return marked
    with open(channels_tsv, newline="", encoding="utf-8") as fh:
        for row in csv.DictReader(fh, delimiter="\t"):
            if (row.get("status") or "").strip().lower() == "bad":
                marked[row["name"]] = ("bad", (row.get("status_description") or "").strip())
    return marked


def electrode_positions(raw):
    montage = raw.get_montage()
    if montage is None:
        return None
    positions = montage.get_positions()["ch_pos"]
    return {name: tuple(float(v) for v in xyz) for name, xyz in positions.items()} or None


def read_raw(root, recording):
    """The recording as an mne Raw with its data loaded (BIDS sidecars applied), read by
    :func:`cairn_science.bids.recording.read_recording`; a header naming a file outside its
    folder, or a table past its limit, stops the job with words."""
    from cairn_science.bids.recording import read_recording
    from cairn_science.bids.report import RefusedFile
    from portal.jobs.services import JobError

    try:
        return read_recording(root, recording.path)
    except RefusedFile as exc:
        raise JobError(str(exc)) from None


def compute_qc(recording, qc_settings):
    """The quality result (JSON-ready) of one recording under stored settings."""
    from cairn_science.qc import QCSettings, run_qc

    with materialised(recording) as root:
        raw = read_raw(root, recording)
        marked = site_status(root / recording.path.replace(
            PurePosixPath(recording.path).name.rsplit("_", 1)[1], "channels.tsv"))
        positions = electrode_positions(raw)
    settings = QCSettings.from_stored(qc_settings)
    result = run_qc(raw, settings=settings, power_line_hz=recording.power_line_hz or 50.0,
                    site_status=marked, positions=positions, random_state=0)
    summary = result.as_dict()
    summary["positions"] = sensor_positions(raw.ch_names, positions)
    return summary


def run_recording(ctx):
    recording = Recording.objects.select_related("version__site", "version__study").get(
        pk=ctx.job.target_id)
    qc_round = QCRound.objects.get(pk=ctx.params["round"])
    site = recording.version.site
    key = {"site": site, "recording_sha256": recording.sha256,
           "settings_digest": qc_round.settings_digest, "code_version": qc_round.code_version}
    if QCRun.objects.filter(**key).exists():
        with ctx.finish() as job:
            job.result = {"reused": True}
        return
    ctx.progress(0, 3, "reading the recording and checking channels and segments")
    summary = compute_qc(recording, qc_round.settings)
    n_bad = sum(1 for c in summary["channels"].values() if c["status"] == "bad")
    with ctx.finish() as job:
        run, created = QCRun.objects.get_or_create(**key, defaults={
            "settings": qc_round.settings, "result": summary, "verdict": summary["verdict"],
            "n_bad_channels": n_bad, "n_channels": len(summary["channels"]),
            "rejected_share": summary["rejected_share"],
        })
        job.result = {"qc_run": run.pk, "verdict": run.verdict}
        if created:
            QCChannel.objects.bulk_create(QCChannel.rows_for(run))
            refresh_decided(site, recording.sha256, runs=[run])
            record("qc.finished", target=run, site=site, study=recording.version.study,
                   worker=True, summary=f"{recording.path}: {run.verdict}, {n_bad} bad "
                   f"channel(s), {100 * run.rejected_share:.1f}% of time rejected",
                   params={"settings_digest": qc_round.settings_digest,
                           "code_version": qc_round.code_version},
                   inputs=[{"recording": recording.pk, "sha256": recording.sha256}],
                   outputs=[{"qc_run": run.pk, "verdict": run.verdict,
                             "result_sha256": canonical_sha256(run.result)}])
