"""First-line checks of an uploaded BIDS EEG dataset, and the index of its recordings.

Checks what a dataset needs to be usable by the pipeline: a dataset description, participants
that match the ``sub-*`` folders, EEG data files that open, sidecars that agree with their data,
and workload ratings inside the study's scale. Every problem names its file, line and field.
"""

import csv
import json
import re
from dataclasses import asdict, dataclass, field
from pathlib import Path

EEG_EXTENSIONS = (".edf", ".bdf", ".vhdr", ".set")
ENTITY = re.compile(r"(?P<key>[a-z]+)-(?P<value>[a-zA-Z0-9]+)")


@dataclass
class Problem:
    path: str
    message: str
    line: int | None = None
    field: str | None = None


@dataclass
class RecordingInfo:
    path: str
    participant: str
    session: str
    task: str
    run: str
    sfreq_hz: float
    n_channels: int
    duration_s: float
    power_line_hz: float | None
    condition: str = ""
    rating: int | None = None


@dataclass
class Report:
    errors: list = field(default_factory=list)
    warnings: list = field(default_factory=list)
    recordings: list = field(default_factory=list)

    @property
    def ok(self):
        return not self.errors

    def error(self, path, message, line=None, field=None):
        self.errors.append(Problem(path, message, line, field))

    def warn(self, path, message, line=None, field=None):
        self.warnings.append(Problem(path, message, line, field))

    def as_dict(self):
        return {
            "errors": [asdict(p) for p in self.errors],
            "warnings": [asdict(p) for p in self.warnings],
            "recordings": [asdict(r) for r in self.recordings],
        }


def read_tsv(path):
    """Rows of a BIDS TSV as dicts, with their 1-based line numbers (header is line 1)."""
    with open(path, newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh, delimiter="\t")
        return reader.fieldnames or [], [(i, row) for i, row in enumerate(reader, start=2)]


def entities(name):
    stem = name.split(".")[0]
    return {m["key"]: m["value"] for m in ENTITY.finditer(stem)}


def _check_description(root, report):
    path = root / "dataset_description.json"
    if not path.exists():
        report.error("dataset_description.json", "missing: every BIDS dataset needs it at its "
                     "top level, with at least Name and BIDSVersion")
        return
    try:
        description = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        report.error("dataset_description.json", f"not valid JSON ({exc}); fix the syntax")
        return
    for key in ("Name", "BIDSVersion"):
        if not description.get(key):
            report.error("dataset_description.json", f"required field {key} is missing or empty",
                         field=key)


def _check_participants(root, report):
    folders = sorted(p.name[4:] for p in root.glob("sub-*") if p.is_dir())
    if not folders:
        report.error(".", "no participant folders (sub-<label>) found")
    path = root / "participants.tsv"
    if not path.exists():
        report.warn("participants.tsv", "missing: recommended, lists every participant")
        return folders
    columns, rows = read_tsv(path)
    if "participant_id" not in columns:
        report.error("participants.tsv", "the first column must be participant_id", line=1,
                     field="participant_id")
        return folders
    listed = {}
    for line, row in rows:
        pid = (row.get("participant_id") or "").strip()
        if not pid.startswith("sub-"):
            report.error("participants.tsv", f"{pid!r} must look like sub-<label>", line=line,
                         field="participant_id")
            continue
        listed[pid[4:]] = line
    for label in folders:
        if label not in listed:
            report.error("participants.tsv", f"folder sub-{label} is not listed; add a row",
                         field="participant_id")
    for label, line in listed.items():
        if label not in folders:
            report.error("participants.tsv", f"sub-{label} is listed but has no folder",
                         line=line, field="participant_id")
    return folders


def _scans_values(root, data_path, *, rating_column, condition_column, rating_min, rating_max,
                  report):
    """Rating and condition for one data file from its session's scans.tsv, if present."""
    ents = entities(data_path.name)
    folder = root / f"sub-{ents['sub']}"
    stem = f"sub-{ents['sub']}"
    if "ses" in ents:
        folder = folder / f"ses-{ents['ses']}"
        stem += f"_ses-{ents['ses']}"
    scans = folder / f"{stem}_scans.tsv"
    if not scans.exists():
        return "", None
    relative_scans = scans.relative_to(root).as_posix()
    columns, rows = read_tsv(scans)
    wanted = data_path.relative_to(folder).as_posix()
    for line, row in rows:
        if (row.get("filename") or "").strip() != wanted:
            continue
        condition = (row.get(condition_column) or "").strip()
        raw = (row.get(rating_column) or "").strip()
        if raw in ("", "n/a"):
            return condition, None
        try:
            rating = int(raw)
        except ValueError:
            report.error(relative_scans, f"rating {raw!r} is not a whole number", line=line,
                         field=rating_column)
            return condition, None
        if not rating_min <= rating <= rating_max:
            report.error(relative_scans, f"rating {rating} lies outside the study's scale "
                         f"{rating_min}–{rating_max}", line=line, field=rating_column)
            return condition, None
        return condition, rating
    return "", None


def _check_recording(root, data_path, report, **scan_options):
    import mne
    import mne_bids

    relative = data_path.relative_to(root).as_posix()
    ents = entities(data_path.name)
    sidecar = data_path.with_name(data_path.name.rsplit("_", 1)[0] + "_eeg.json")
    sidecar_data = {}
    if sidecar.exists():
        try:
            sidecar_data = json.loads(sidecar.read_text(encoding="utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError) as exc:
            report.error(sidecar.relative_to(root).as_posix(), f"not valid JSON ({exc})")
            return
    bids_path = mne_bids.get_bids_path_from_fname(data_path)
    bids_path.root = root
    try:
        with mne.utils.use_log_level("ERROR"):
            raw = mne_bids.read_raw_bids(bids_path, verbose="ERROR")
    except Exception as exc:  # the reader's own words say what it could not read
        report.error(relative, f"could not be read as BIDS EEG: {exc}")
        return
    sfreq = float(raw.info["sfreq"])
    declared = sidecar_data.get("SamplingFrequency")
    if declared is not None and abs(float(declared) - sfreq) > 1e-6 * sfreq:
        report.error(
            sidecar.relative_to(root).as_posix(),
            f"SamplingFrequency says {declared} Hz but {data_path.name} is sampled at "
            f"{sfreq:g} Hz; correct the sidecar", field="SamplingFrequency",
        )
    channels_tsv = data_path.with_name(data_path.name.rsplit("_", 1)[0] + "_channels.tsv")
    if channels_tsv.exists():
        _, rows = read_tsv(channels_tsv)
        in_file = set(raw.ch_names)
        for line, row in rows:
            name = (row.get("name") or "").strip()
            if name and name not in in_file:
                report.error(channels_tsv.relative_to(root).as_posix(),
                             f"channel {name!r} is not in {data_path.name}", line=line,
                             field="name")
    condition, rating = _scans_values(root, data_path, report=report, **scan_options)
    report.recordings.append(RecordingInfo(
        path=relative, participant=ents.get("sub", ""), session=ents.get("ses", ""),
        task=ents.get("task", ""), run=ents.get("run", ""), sfreq_hz=sfreq,
        n_channels=len(raw.ch_names), duration_s=float(raw.n_times / sfreq),
        power_line_hz=sidecar_data.get("PowerLineFrequency"),
        condition=condition, rating=rating,
    ))


def eeg_data_files(root):
    root = Path(root)
    return sorted(
        p for p in root.glob("sub-*/**/eeg/*_eeg.*") if p.suffix.lower() in EEG_EXTENSIONS
    )


def validate_dataset(root, *, rating_column="workload_rating", condition_column="difficulty",
                     rating_min=1, rating_max=9, on_file=None):
    """Check a BIDS EEG dataset folder; returns a Report with errors, warnings and recordings.

    ``on_file(done, total)`` is called after each data file, for progress.
    """
    root = Path(root)
    report = Report()
    _check_description(root, report)
    if not (root / "README").exists() and not any(root.glob("README.*")):
        report.warn("README", "missing: describe the dataset for people who reuse it")
    _check_participants(root, report)
    files = eeg_data_files(root)
    if not files:
        report.error(".", "no EEG data files (sub-*/[ses-*/]eeg/*_eeg.edf|.bdf|.vhdr|.set)")
    for done, data_path in enumerate(files, start=1):
        _check_recording(
            root, data_path, report, rating_column=rating_column,
            condition_column=condition_column, rating_min=rating_min, rating_max=rating_max,
        )
        if on_file is not None:
            on_file(done, len(files))
    return report
