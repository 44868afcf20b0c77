"""A quality round as a BIDS derivative dataset: channels.tsv with status per recording, plus
every metric and threshold in a JSON file beside it."""

import csv
import json
import tempfile
import zipfile
from pathlib import Path, PurePosixPath

from django.http import FileResponse

from portal.accounts.permissions import Action, require
from portal.audit.events import record
from portal.datasets import blobs
from portal.quality.access import visible_round
from portal.quality.services import effective_channels, latest_overrides, runs_of
from portal.spreadsheet import safe_cell

DATA_COMPANIONS = {".vhdr": (".vmrk", ".eeg"), ".set": (".fdt",)}


def _write_channels(source, target, channels):
    """Copy channels.tsv with the effective status and its reason in words. Text cells a
    spreadsheet would run as formulas are made inert, except channel names, which must match
    the recording's (upload validation refuses names that look like formulas)."""
    with open(source, newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh, delimiter="\t")
        fields = list(reader.fieldnames or [])
        rows = list(reader)
    for extra in ("status", "status_description"):
        if extra not in fields:
            fields.append(extra)
    for row in rows:
        info = channels.get(row["name"])
        if info is not None:
            row["status"] = info["status"]
            row["status_description"] = "; ".join(info["reasons"]) or "n/a"
        else:
            row.setdefault("status", "n/a")
            row.setdefault("status_description", "n/a")
    with open(target, "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=fields, delimiter="\t", lineterminator="\n")
        writer.writeheader()
        writer.writerows({k: v if k == "name" else safe_cell(v) for k, v in row.items()}
                         for row in rows)


def write_derivative(qc_round, root):
    """Write the derivative dataset of ``qc_round`` into the new folder ``root``."""
    root = Path(root)
    root.mkdir(parents=True)
    version = qc_round.version
    (root / "dataset_description.json").write_text(json.dumps({
        "Name": f"Quality checks of {version.site.name}, dataset version {version.number}",
        "BIDSVersion": "1.9.0",
        "DatasetType": "derivative",
        "GeneratedBy": [{
            "Name": "Cairn quality checks", "Version": qc_round.code_version,
            "Description": "Channel and segment checks; status in *_channels.tsv, metrics and "
                           "thresholds in *_qc.json.",
        }],
        "SourceDatasets": [{"URL": f"cairn:dataset-version/{version.pk}",
                            "Version": version.manifest_sha256}],
    }, indent=2) + "\n")
    files = {f.path: f for f in version.files.all()}
    runs = runs_of(qc_round)
    written = 0
    for recording in version.recordings.all():
        run = runs.get(recording.sha256)
        if run is None:
            continue
        data = PurePosixPath(recording.path)
        stem = data.name.rsplit("_", 1)[0]
        wanted = [data.as_posix()] + [
            data.with_suffix(s).as_posix() for s in DATA_COMPANIONS.get(data.suffix, ())
        ] + [str(data.parent / f"{stem}_eeg.json")]
        (root / data.parent).mkdir(parents=True, exist_ok=True)
        for path in wanted:
            if path in files:
                blobs.copy_blob_to(files[path].sha256, root / path)
        channels = effective_channels(run, latest_overrides(version.site, recording.sha256))
        source_tsv = str(data.parent / f"{stem}_channels.tsv")
        if source_tsv in files:
            with blobs.open_blob(files[source_tsv].sha256) as fh, open(
                    root / (source_tsv + ".orig"), "wb") as out:
                out.write(fh.read())
            _write_channels(root / (source_tsv + ".orig"), root / source_tsv, channels)
            (root / (source_tsv + ".orig")).unlink()
        (root / data.parent / f"{stem}_qc.json").write_text(json.dumps({
            "Recording": recording.path, "RecordingSHA256": recording.sha256,
            "Settings": qc_round.settings, "SettingsSHA256": qc_round.settings_digest,
            "CodeVersion": qc_round.code_version, "Verdict": run.verdict,
            "EffectiveStatus": {name: {"status": c["status"], "set_by": c["by"],
                                       "reasons": c["reasons"]} for name, c in channels.items()},
            "Checks": run.result,
        }, indent=1, sort_keys=True) + "\n")
        written += 1
    return written


def derivative_zip(request, round_id):
    """The round's BIDS derivative as a zip for the requesting person or token (the web page's
    and the API's one download): visible by the version's (site, study), download allowed
    there, recorded as a download event."""
    qc_round = visible_round(request.user, round_id)
    version = qc_round.version
    require(request.user, Action.DOWNLOAD, site=version.site, study=version.study)
    folder = f"{version.site.slug}-v{version.number}-qc{qc_round.pk}"
    spool = tempfile.TemporaryFile()
    with tempfile.TemporaryDirectory(prefix="cairn-qc-export-") as tmp:
        root = Path(tmp) / folder
        write_derivative(qc_round, root)
        with zipfile.ZipFile(spool, "w", compression=zipfile.ZIP_DEFLATED) as archive:
            for path in sorted(root.rglob("*")):
                if path.is_file():
                    archive.write(path, f"{folder}/{path.relative_to(root).as_posix()}")
    spool.seek(0)
    record("download", actor=request.user, token=getattr(request, "api_token", None),
           site=version.site, study=version.study, target=qc_round,
           summary=f"downloaded the quality derivative of {version}")
    return FileResponse(spool, as_attachment=True, filename=f"{folder}.zip")
