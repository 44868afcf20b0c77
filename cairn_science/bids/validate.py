"""Checks of an uploaded BIDS EEG dataset, and the index of its recordings and blocks.

:func:`validate_dataset` checks what the pipeline needs: file names against the BIDS schema,
the dataset description, participants matching the ``sub-*`` folders, sidecars (by the
inheritance principle) that agree with the data files mne-bids reads, channels and events
tables, workload ratings on the study's scale, and nothing that identifies a participant.
Every problem names its file, and its line and field where there is one.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable
from dataclasses import asdict
from pathlib import Path

from . import deid as deid_checks
from . import schema
from .companions import CompanionError, companion_files
from .headers import (
    HeaderError,
    HeaderFacts,
    check_brainvision_structure,
    check_edf_structure,
    read_header_facts,
    read_with_mne_bids,
    sha256_of,
)
from .names import check_path, is_eeg_data, walk_dataset
from .ratings import (
    RatingSettings,
    Scale,
    check_dictionary,
    make_block,
    read_phenotype,
    read_rating,
    row_matches,
)
from .recording import check_table_sizes
from .report import BlockInfo, Finding, Problem, RecordingInfo, RefusedFile, Report
from .sidecars import Tree
from .tables import check_channels, check_events, check_participants, check_scans

__all__ = [
    "BlockInfo", "Finding", "Problem", "RecordingInfo", "Report", "eeg_data_files",
    "validate_dataset",
]

DEID_MODES = ("refuse", "scrub")
FORMATS = {".edf": "EDF", ".bdf": "BDF", ".vhdr": "BrainVision", ".set": "EEGLAB"}
# Sidecar channel-count fields and the channels.tsv types they count; MiscChannelCount
# counts every other type (as the bids-examples count GSR, PPG, RESP and TEMP channels).
CHANNEL_COUNT_FIELDS = {
    "EEGChannelCount": ("EEG",), "EOGChannelCount": ("EOG", "HEOG", "VEOG"),
    "ECGChannelCount": ("ECG",), "EMGChannelCount": ("EMG",), "TriggerChannelCount": ("TRIG",),
}
JSON_TYPES = {
    "string": lambda v: isinstance(v, str),
    "number": lambda v: isinstance(v, int | float) and not isinstance(v, bool),
    "integer": lambda v: isinstance(v, int) and not isinstance(v, bool),
    "boolean": lambda v: isinstance(v, bool),
    "object": lambda v: isinstance(v, dict),
    "array": lambda v: isinstance(v, list),
}
DEID_ADVICE = {
    "edf": "set the field to 'X X X X' (the EDF+ value for unknown) in the export tool, or "
           "ask the study lead to have Cairn scrub identifiers (a study setting)",
    "vhdr": "delete the line from the [Comment] section of the .vhdr file, or ask the study "
            "lead to have Cairn scrub identifiers (a study setting)",
    "participants": "remove the column from participants.tsv and participants.json (age in "
                    "years and sex are fine), or ask the study lead to have Cairn scrub "
                    "identifiers (a study setting)",
}


class _Context:
    """State shared by the per-recording checks of one run."""

    def __init__(self, *, root, tree, report, settings, scale, read_data, known,
                 duration_tolerance_s, sfreq_tolerance_hz, table_limits=None):
        self.root = root
        self.table_limits = table_limits
        self.tree = tree
        self.report = report
        self.settings = settings
        self.scale = scale
        self.read_data = read_data
        self.known = known
        self.duration_tolerance_s = duration_tolerance_s
        self.sfreq_tolerance_hz = sfreq_tolerance_hz
        self.channels = {}
        self.events = {}
        self.missing_recommended = {}
        self.companions = {}
        self._once = set()

    def once(self, *key):
        """True the first time a key is seen: a problem of a shared file is reported once."""
        if key in self._once:
            return False
        self._once.add(key)
        return True


def eeg_data_files(root: str | os.PathLike) -> list:
    """EEG data files of a dataset (paths relative to the root) whose names the schema
    accepts."""
    checks = [check_path(path) for path in walk_dataset(root).files]
    return [check.path for check in checks if is_eeg_data(check)]


def _report_names(report, checks, listing):
    for link in listing.links:
        report.error(link, "is a symbolic link; Cairn does not follow links, because they can "
                     "lead outside the dataset. Replace it with a copy of the file or folder",
                     code="layout.link")
    for folder in listing.unknown_folders:
        report.warn(folder + "/", "this folder is not part of the BIDS layout and was not "
                    "checked; move it to sourcedata/ or derivatives/, or list it in "
                    ".bidsignore", code="name.unknown_folder")
    for check in checks:
        if check.ok:
            continue
        inside_subject = check.path.startswith("sub-")
        report.add("error" if inside_subject else "warning", check.path,
                   f"file name does not follow the BIDS standard: {check.message}",
                   code="name.invalid")


def _check_description(tree, report):
    path = "dataset_description.json"
    if not tree.exists(path):
        report.error(path, "missing: every BIDS dataset needs it at its top level, with at "
                     "least Name and BIDSVersion", code="description.missing")
        return
    document = tree.json(path)
    tree.take_problems(report, document)
    if document.data is None:
        return
    examples = {"Name": '"Name": "<title of the dataset>"',
                "BIDSVersion": f'"BIDSVersion": "{schema.version()}"'}
    for key, example in examples.items():
        value = document.data.get(key)
        if not isinstance(value, str) or not value.strip():
            what = "is missing" if key not in document.data else "must be a non-empty text"
            report.error(path, f"required field {key} {what}; add it, for example {example}",
                         field=key, code="description.field")


def _check_readme(tree, report):
    present = [name for name in schema.readme_names() if tree.exists(name)]
    if not present:
        report.warn("README", "missing: add a README (README, README.md, README.rst or "
                    "README.txt) that describes the dataset for people who reuse it",
                    code="readme.missing")
    elif (tree.root / present[0]).stat().st_size == 0:
        report.warn(present[0], "is empty; describe the dataset for people who reuse it",
                    code="readme.empty")


def _subject_folders(root, listing):
    ignored = set(listing.ignored)
    return sorted(
        entry.name[4:] for entry in Path(root).iterdir()
        if entry.is_dir() and entry.name.startswith("sub-") and entry.name + "/" not in ignored
    )


def _conforms(value, spec):
    """Whether a JSON value fits a schema field definition (type, enum, anyOf, limits)."""
    if "anyOf" in spec:
        return any(_conforms(value, option) for option in spec["anyOf"])
    kind = spec.get("type")
    if kind in JSON_TYPES and not JSON_TYPES[kind](value):
        return False
    if "enum" in spec and value not in spec["enum"]:
        return False
    if isinstance(value, int | float) and not isinstance(value, bool):
        if "minimum" in spec and value < spec["minimum"]:
            return False
        if "exclusiveMinimum" in spec and value <= spec["exclusiveMinimum"]:
            return False
        if "maximum" in spec and value > spec["maximum"]:
            return False
    return True


def _describe(spec):
    if "anyOf" in spec:
        return " or ".join(_describe(option) for option in spec["anyOf"])
    if "enum" in spec:
        items = [repr(item) for item in spec["enum"]]
        return items[0] if len(items) == 1 else "one of " + ", ".join(items)
    words = {"string": "a text", "number": "a number", "integer": "a whole number",
             "object": "an object ({...})", "array": "a list", "boolean": "true or false"}
    text = words.get(spec.get("type"), "a value")
    if "exclusiveMinimum" in spec:
        text += f" above {spec['exclusiveMinimum']}"
    if "minimum" in spec:
        text += f" of at least {spec['minimum']}"
    return text


def _source_of(tree, sources, key):
    """The deepest sidecar that gives ``key`` (deeper files override higher ones)."""
    for path in reversed(sources):
        data = tree.json(path).data or {}
        if key in data:
            return path
    return sources[-1]


def _check_eeg_sidecar(ctx, data, sidecar, sources):
    report = ctx.report
    required, recommended = schema.eeg_sidecar_fields()
    if not sources:
        expected = data.path.rsplit("_", 1)[0] + "_eeg.json"
        if ctx.once("no-sidecar", expected):
            report.error(expected, f"missing: {data.path} needs an _eeg.json sidecar (next to "
                         "it or higher in the tree) with " + ", ".join(required),
                         code="sidecar.missing")
        return
    for key in required:
        if key not in sidecar:
            path = sources[-1]
            if ctx.once("required", path, key):
                report.error(path, f"required field {key} is missing (recording {data.path}); "
                             "add it to this sidecar", field=key, code="sidecar.required")
    for key in recommended:
        if key not in sidecar:
            ctx.missing_recommended.setdefault(key, []).append(sources[-1])
    for key in (*required, *recommended):
        spec = schema.metadata_spec(key)
        if key not in sidecar or spec is None or _conforms(sidecar[key], spec):
            continue
        path = _source_of(ctx.tree, sources, key)
        if ctx.once("value", path, key):
            report.add("error" if key in required else "warning", path,
                       f"{key} is {sidecar[key]!r}, but it must be {_describe(spec)}",
                       field=key, code="sidecar.value")
    sfreq = sidecar.get("SamplingFrequency")
    if isinstance(sfreq, int | float) and not isinstance(sfreq, bool) and sfreq <= 0:
        path = _source_of(ctx.tree, sources, "SamplingFrequency")
        if ctx.once("value", path, "SamplingFrequency"):
            report.error(path, f"SamplingFrequency is {sfreq}; it must be above 0 Hz",
                         field="SamplingFrequency", code="sidecar.value")


def _number(value):
    if isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value):
        return float(value)
    return None


def _header_problems(ctx, data):
    """Structure problems of the data file itself; True when it is fit to be opened.

    The files its header names come first: a name leading outside the recording's folder
    is reported on its header line, and then nothing the header names is opened.
    """
    full = ctx.root / data.path
    try:
        ctx.companions[data.path] = companion_files(ctx.root, data.path)
    except CompanionError as exc:
        ctx.report.errors.extend(exc.problems)
        return False
    fit = True
    if data.extension in (".edf", ".bdf"):
        for severity, message in check_edf_structure(full):
            ctx.report.add(severity, data.path, message, code="header.structure")
            fit = fit and severity != "error"
    elif data.extension == ".vhdr":
        for severity, key, message in check_brainvision_structure(
                full, companions=ctx.companions[data.path]):
            ctx.report.add(severity, data.path, message, field=key, code="header.structure")
            fit = fit and severity != "error"
    return fit


def _facts(ctx, data, sha256, *, metadata_trouble):
    """Header facts from ``known`` (same content seen before), else from Cairn's own header
    reading (:func:`~cairn_science.bids.headers.read_header_facts`: EDF, BDF, BrainVision),
    else read with mne-bids (EEGLAB and the corners the own reading leaves to it). The
    tables and sidecars mne-bids would read are held to the same limits either way
    (:func:`~cairn_science.bids.recording.check_table_sizes`), so what is refused does not
    depend on which reader gave the facts.

    The file's own structure is checked either way: it is cheap, and mne reads a truncated
    EDF without complaint.

    ``metadata_trouble`` says that the recording's sidecars or tables already have errors,
    which are then the likely reason when mne-bids cannot read it.
    """
    if ctx.read_data and not _header_problems(ctx, data):
        return None
    previous = ctx.known.get(sha256)
    if previous is not None:
        info = previous if isinstance(previous, dict) else asdict(previous)
        names = info.get("channel_names")
        if info.get("header_read", True) and names and info.get("sfreq_hz") and info.get(
                "duration_s") is not None:
            return HeaderFacts(float(info["sfreq_hz"]), float(info["duration_s"]), list(names))
    if not ctx.read_data:
        return None
    try:
        check_table_sizes(ctx.root, data.path, table_limits=ctx.table_limits)
        facts = read_header_facts(ctx.root, data.path, companions=ctx.companions.get(data.path))
        if facts is not None:
            return facts
        return read_with_mne_bids(ctx.root, data.path, table_limits=ctx.table_limits)
    except RefusedFile as exc:
        for problem in exc.problems:
            if not any((error.path, error.code) == (problem.path, problem.code)
                       for error in ctx.report.errors):
                ctx.report.errors.append(problem)
        return None
    except HeaderError as exc:
        advice = ("fix the problems reported for its sidecars and tables first"
                  if metadata_trouble else
                  "check that the file is complete and in the format its extension says")
        ctx.report.error(data.path, f"could not be read by mne-bids ({exc}); {advice}",
                         code="header.unreadable")
        return None


def _check_against_header(ctx, data, facts, sidecar, sources, channels_path, channels):
    report, tree = ctx.report, ctx.tree
    declared = _number(sidecar.get("SamplingFrequency"))
    if declared is not None and abs(declared - facts.sfreq_hz) > ctx.sfreq_tolerance_hz:
        path = _source_of(tree, sources, "SamplingFrequency")
        report.error(path, f"SamplingFrequency says {declared:g} Hz but {data.path} is "
                     f"sampled at {facts.sfreq_hz:g} Hz; correct the sidecar",
                     field="SamplingFrequency", code="sidecar.sfreq_mismatch")
    duration = _number(sidecar.get("RecordingDuration"))
    tolerance = max(ctx.duration_tolerance_s, 2.0 / facts.sfreq_hz)
    if duration is not None and abs(duration - facts.duration_s) > tolerance:
        path = _source_of(tree, sources, "RecordingDuration")
        report.error(path, f"RecordingDuration says {duration:g} s but {data.path} lasts "
                     f"{facts.duration_s:g} s; correct the sidecar", field="RecordingDuration",
                     code="sidecar.duration_mismatch")
    if channels is None:
        return
    listed = {channel.name: channel for channel in channels}
    in_file = list(facts.channel_names)
    extra = [channel for channel in channels if channel.name not in set(in_file)]
    absent = [name for name in in_file if name not in listed]
    if len(channels) != len(in_file) and ctx.once("count", channels_path, data.path):
        report.error(channels_path, f"lists {len(channels)} channels but {data.path} has "
                     f"{len(in_file)} (channel count differs); list each channel of the data "
                     "file once, in its order", field="name", code="channels.count_mismatch")
    for channel in extra:
        if ctx.once("extra", channels_path, channel.name, data.path):
            report.error(channels_path, f"channel {channel.name!r} is not in {data.path} "
                         f"(its {len(in_file)} channels are {', '.join(in_file[:8])}"
                         f"{', ...' if len(in_file) > 8 else ''}); correct the name or remove "
                         "the row", line=channel.line, field="name",
                         code="channels.name_mismatch")
    for name in absent:
        if ctx.once("absent", channels_path, name, data.path):
            report.error(channels_path, f"channel {name!r} of {data.path} has no row; add "
                         "it", field="name", code="channels.name_mismatch")
    if not extra and not absent and [c.name for c in channels] != in_file:
        if ctx.once("order", channels_path, data.path):
            report.warn(channels_path, f"lists the channels of {data.path} in another order "
                        "than the data file; use the data file's order", field="name",
                        code="channels.order")


def _check_channel_counts(ctx, sidecar, sources, channels_path, channels):
    counted_types = {kind for types in CHANNEL_COUNT_FIELDS.values() for kind in types}
    other = tuple(sorted({channel.type for channel in channels} - counted_types)) or ("MISC",)
    for key, types in {**CHANNEL_COUNT_FIELDS, "MiscChannelCount": other}.items():
        declared = sidecar.get(key)
        if not isinstance(declared, int) or isinstance(declared, bool):
            continue
        counted = sum(channel.type in types for channel in channels)
        path = _source_of(ctx.tree, sources, key)
        if declared != counted and ctx.once("typecount", path, key, channels_path):
            ctx.report.warn(path, f"{key} is {declared} but {channels_path} lists {counted} "
                            f"channel(s) of type {'/'.join(types)}; make them agree",
                            field=key, code="sidecar.channel_count")


def _check_event_times(ctx, data, events_path, events, duration_s):
    for event in events:
        if not 0 <= event.onset_s <= duration_s and ctx.once("onset", events_path, event.line):
            ctx.report.error(events_path, f"onset {event.onset_s:g} s lies outside the "
                             f"recording {data.path} (0 to {duration_s:g} s); correct the "
                             "onset or remove the event", line=event.line, field="onset",
                             code="events.onset_outside")


def _check_recording(ctx, data):
    """All checks of one data file; returns its index entry (blocks filled in later)."""
    tree, report = ctx.tree, ctx.report
    errors_before = len(report.errors)
    sidecar, sources, found = tree.merged_json(data, suffix="eeg", report=report)
    if sources or not found.paths:
        _check_eeg_sidecar(ctx, data, sidecar, sources)
    channels_path = tree.closest_table(data, suffix="channels", report=report)
    channels = None
    if channels_path is None:
        if ctx.once("no-channels", data.path):
            report.warn(data.path, "has no _channels.tsv; add one listing each channel with "
                        "name, type and units", code="channels.missing")
    else:
        if channels_path not in ctx.channels:
            ctx.channels[channels_path] = check_channels(tree, report, channels_path)
        channels = ctx.channels[channels_path]
    if channels is not None:
        _check_channel_counts(ctx, sidecar, sources, channels_path, channels)
    events_path = tree.closest_table(data, suffix="events", report=report)
    events = None
    if events_path is not None:
        if events_path not in ctx.events:
            ctx.events[events_path] = check_events(tree, report, events_path)
        events = ctx.events[events_path]
    sha256 = sha256_of(ctx.root / data.path)
    facts = _facts(ctx, data, sha256, metadata_trouble=len(report.errors) > errors_before)
    if facts is not None:
        _check_against_header(ctx, data, facts, sidecar, sources, channels_path, channels)
        if events:
            _check_event_times(ctx, data, events_path, events, facts.duration_s)
        sfreq, duration, ch_names = facts.sfreq_hz, facts.duration_s, facts.channel_names
    else:
        sfreq = _number(sidecar.get("SamplingFrequency"))
        duration = _number(sidecar.get("RecordingDuration"))
        ch_names = [channel.name for channel in channels or ()]
    entities = data.entities
    return RecordingInfo(
        path=data.path, participant=entities.get("sub", ""), session=entities.get("ses", ""),
        task=entities.get("task", ""), run=entities.get("run", ""), sfreq_hz=sfreq,
        n_channels=len(ch_names) if ch_names else None, duration_s=duration,
        power_line_hz=_number(sidecar.get("PowerLineFrequency")),
        acquisition=entities.get("acq", ""), data_format=FORMATS[data.extension],
        sha256=sha256, header_read=facts is not None, channel_names=list(ch_names),
    ), (events_path, events)


def _check_one_format_per_recording(report, data_files):
    stems = {}
    for data in data_files:
        stems.setdefault(data.path[: -len(data.extension)], []).append(data.path)
    for paths in stems.values():
        if len(paths) > 1:
            report.error(paths[1], f"the same recording is also given as {paths[0]}; keep one "
                         "data file per recording", code="layout.two_formats")


def _is_unrated(settings, condition, task):
    return condition in settings.unrated_conditions or (
        not condition and task in settings.unrated_conditions
    )


def _scans_blocks(ctx, recordings, scans):
    """One block per recording, with condition and rating from its scans.tsv row."""
    settings, report = ctx.settings, ctx.report
    no_column = set()
    for data, info, _ in recordings:
        entry = scans.get(data.path)
        rated = None
        if entry is not None:
            if settings.condition_column not in entry.row and ctx.once("no-condition",
                                                                       entry.path):
                report.warn(entry.path, f"has no {settings.condition_column} column; its "
                            "recordings have no condition", line=1,
                            field=settings.condition_column, code="ratings.no_condition")
            if settings.column not in entry.row:
                if ctx.once("no-rating-column", entry.path):
                    report.warn(entry.path, f"has no {settings.column} column; its recordings "
                                "stay without a workload rating", line=1, field=settings.column,
                                code="ratings.no_column")
                no_column.add(entry.path)
            rated = read_rating(entry.row, path=entry.path, line=entry.line, settings=settings,
                                scale=ctx.scale, report=report)
        condition = rated.condition if rated else ""
        info.blocks = [make_block(onset_s=0.0, duration_s=info.duration_s, rated=rated,
                                  condition=condition, scale=ctx.scale)]
        if entry is not None and entry.path in no_column:
            continue
        _warn_unrated(ctx, data, info.blocks[0], entry.path if entry else data.path,
                      entry.line if entry else None, listed=entry is not None)


def _warn_unrated(ctx, data, block, path, line, *, listed):
    if block.rating is not None or _is_unrated(ctx.settings, block.condition,
                                               data.entities.get("task", "")):
        return
    column = ctx.settings.column
    where = "its row has no rating" if listed else "it is not listed in a scans.tsv"
    ctx.report.warn(path, f"{data.path} has no workload rating ({where}); it is kept without a "
                    f"label. Write the rating in {column}, or n/a with a condition listed as "
                    "unrated", line=line, field=column if listed else None,
                    code="ratings.missing")


def _phenotype_blocks(ctx, recordings, rows):
    """Blocks from the phenotype table: whole recordings, or events named by trial_type."""
    settings, report, scale = ctx.settings, ctx.report, ctx.scale
    matched = {row.line: [] for row in rows}
    for data, info, (events_path, events) in recordings:
        mine = [row for row in rows if row_matches(row, data)]
        for row in mine:
            matched[row.line].append(data)
        by_type = {row.keys["trial_type"]: row for row in mine if "trial_type" in row.keys}
        whole = [row for row in mine if "trial_type" not in row.keys]
        if by_type:
            info.blocks = _event_blocks(ctx, data, info, events_path, events, by_type)
            continue
        if len(whole) > 1:
            lines = ", ".join(str(row.line) for row in whole)
            report.error(settings.table, f"lines {lines} all rate {data.path}; add session_id, "
                         "task, run or trial_type columns so that each row rates one block",
                         line=whole[1].line, code="ratings.ambiguous")
        row = whole[0] if whole else None
        rated = row.rated if row else None
        condition = rated.condition if rated else ""
        info.blocks = [make_block(onset_s=0.0, duration_s=info.duration_s, rated=rated,
                                  condition=condition, scale=scale)]
        if row is None:
            if not _is_unrated(settings, "", data.entities.get("task", "")):
                report.warn(data.path, f"no row of {settings.table} rates this recording; it "
                            "is kept without a label", code="ratings.missing")
        elif rated.rating is None and not _is_unrated(settings, condition,
                                                      data.entities.get("task", "")):
            report.warn(settings.table, f"{data.path} has no workload rating; it is kept "
                        "without a label", line=row.line, field=settings.column,
                        code="ratings.missing")
    for row in rows:
        sessions = {data.entities.get("ses") for data in matched[row.line]}
        if not matched[row.line]:
            report.warn(settings.table, "this row rates no recording in the upload; check "
                        "participant_id, session_id, task, run and trial_type", line=row.line,
                        code="ratings.unmatched")
        elif len(sessions) > 1:
            report.error(settings.table, f"this row matches recordings of sessions "
                         f"{', '.join(sorted(s or '-' for s in sessions))}; add a session_id "
                         "column", line=row.line, field="session_id", code="ratings.ambiguous")


def _event_blocks(ctx, data, info, events_path, events, by_type):
    settings, report = ctx.settings, ctx.report
    if events is None:
        report.error(data.path, f"{settings.table} rates blocks of this recording by "
                     "trial_type, but it has no usable _events.tsv marking the blocks",
                     code="ratings.no_events")
        return []
    blocks = []
    for event in sorted(events, key=lambda e: e.onset_s):
        row = by_type.get(event.trial_type)
        if row is None and event.trial_type not in settings.unrated_conditions:
            continue
        condition = row.rated.condition if row else event.trial_type
        blocks.append(make_block(onset_s=event.onset_s, duration_s=event.duration_s,
                                 rated=row.rated if row else None, condition=condition,
                                 scale=ctx.scale))
        end = None if event.duration_s is None else event.onset_s + event.duration_s
        if event.duration_s is None or event.duration_s == 0:
            report.warn(events_path, f"block {event.trial_type!r} has no duration, so its "
                        "end is unknown; give block events their length in seconds",
                        line=event.line, field="duration", code="ratings.block_duration")
        elif info.duration_s is not None and end > info.duration_s + ctx.duration_tolerance_s:
            report.warn(events_path, f"block {event.trial_type!r} ends at {end:g} s, after "
                        f"the end of {data.path} ({info.duration_s:g} s)", line=event.line,
                        field="duration", code="ratings.block_end")
    present = {event.trial_type for event in events}
    for trial_type, row in by_type.items():
        if trial_type not in present:
            report.warn(settings.table, f"rates trial_type {trial_type!r}, but {data.path} has "
                        "no such event; check the name", line=row.line, field="trial_type",
                        code="ratings.no_block")
        elif row.rated.rating is None and not _is_unrated(settings, row.rated.condition, ""):
            report.warn(settings.table, f"block {trial_type!r} of {data.path} has no workload "
                        "rating; it is kept without a label", line=row.line,
                        field=settings.column, code="ratings.missing")
    return blocks


def _summarise_recommended(ctx, n_recordings):
    for key, paths in ctx.missing_recommended.items():
        unique = list(dict.fromkeys(paths))
        others = f" (this sidecar and {len(unique) - 1} more)" if len(unique) > 1 else ""
        ctx.report.warn(unique[0], f"recommended field {key} is missing for {len(paths)} of "
                        f"{n_recordings} recording(s){others}; add it where it is known",
                        field=key, code="sidecar.recommended")


def _findings_to_problems(report, deid):
    for finding in report.findings:
        if finding.kind == "measurement_date":
            report.warn(finding.path, f"{finding.detail}, which dates the recording; keep dates "
                        "only if the study's data agreement allows them (scrubbing can reset "
                        "them)",
                        line=finding.line, field=finding.field, code="deid.measurement_date")
            continue
        place = ("participants" if finding.path.endswith("participants.tsv")
                 else "vhdr" if finding.path.endswith(".vhdr") else "edf")
        report.add("error" if deid == "refuse" else "warning", finding.path,
                   f"{finding.detail}, which may identify a person; {DEID_ADVICE[place]}",
                   line=finding.line, field=finding.field, code="deid.identifier")


def validate_dataset(root: str | os.PathLike, *, ratings: dict | None = None,
                     scale: dict | None = None, on_file: Callable | None = None,
                     deid: str = "refuse", read_data: bool = True, known: dict | None = None,
                     duration_tolerance_s: float = 1.0, sfreq_tolerance_hz: float = 0.01,
                     table_limits: dict | None = None, report: Report | None = None) -> Report:
    """Check a BIDS EEG dataset folder; return a :class:`Report`.

    Parameters
    ----------
    root : path-like
        The dataset folder (holding dataset_description.json).
    ratings : dict | None
        Where the workload ratings are: ``{"source": "scans" | "phenotype", "column",
        "condition_column", "table", "unrated_conditions"}``; None gives scans.tsv columns
        ``workload_rating`` and ``difficulty``, with ``rest`` unrated.
    scale : dict | None
        The study's rating scale ``{"min", "max", "levels": [{"name", "min", "max"}]}``;
        None gives 1-9 with low 1-3, moderate 4-6, high 7-9 (common practice, no source).
    on_file : callable | None
        ``on_file(done, total)`` after each EEG data file, for progress.
    report : Report | None
        The report to fill (returned); a caller's ``on_file`` may read the problems found so
        far from it, e.g. to show them while the check runs.
    deid : "refuse" | "scrub"
        Identifier findings are errors ("refuse") or warnings, for a caller that then runs
        :func:`cairn_science.bids.deid.scrub_dataset` ("scrub").
    read_data : bool
        Open data files with mne-bids and compare them with their sidecars. False checks
        structure only (for trees whose data files are placeholders).
    known : dict | None
        ``{sha256: RecordingInfo or its dict}`` from an earlier run; data files with the
        same content are not opened again. An entry needs ``sfreq_hz``, ``duration_s`` and
        ``channel_names`` from a read header (entries with ``header_read`` False are
        ignored).
    duration_tolerance_s, sfreq_tolerance_hz : float
        Allowed difference between sidecar and data file.
    table_limits : dict | None
        ``{kind: TableLimit(max_rows, max_size_bytes)}`` replacing the limits of
        :data:`cairn_science.bids.limits.TABLE_LIMITS` for those kinds of table (channels,
        events, participants, ...); a table past its limit is refused before it is parsed.
    """
    if deid not in DEID_MODES:
        raise ValueError(f"deid must be one of {DEID_MODES}, got {deid!r}")
    settings = RatingSettings.from_dict(ratings)
    scale = Scale.from_dict(scale)
    root = Path(root)
    if report is None:
        report = Report()
    report.bids_version = schema.version()
    if not root.is_dir():
        report.error(".", "the upload holds no dataset folder; upload the folder that holds "
                     "dataset_description.json", code="upload.no_folder")
        return report
    listing = walk_dataset(root)
    checks = [check_path(path) for path in listing.files]
    _report_names(report, checks, listing)
    tree = Tree(root, checks, table_limits=table_limits)
    _check_description(tree, report)
    _check_readme(tree, report)
    folders = _subject_folders(root, listing)
    if not folders:
        report.error(".", "no participant folders (sub-<label>/) found; put each participant's "
                     "data in its own sub-<label>/ folder", code="layout.no_subjects")
    check_participants(tree, report, folders=folders)
    if tree.exists("participants.tsv") and tree.table("participants.tsv").readable:
        report.findings.extend(deid_checks.participants_findings(tree.table("participants.tsv")))
    ctx = _Context(root=root, tree=tree, report=report, settings=settings, scale=scale,
                   read_data=read_data, known=known or {},
                   duration_tolerance_s=duration_tolerance_s,
                   sfreq_tolerance_hz=sfreq_tolerance_hz, table_limits=table_limits)
    scans = {}
    for check in checks:
        if not (check.ok and check.extension == ".tsv" and check.suffix in ("scans",
                                                                            "sessions")):
            continue
        if check.suffix == "scans":
            scans.update(check_scans(tree, report, check.path))
            if settings.source == "scans":
                dictionary, sources, _ = tree.merged_json(check, suffix="scans", report=report)
                if sources and ctx.once("scans-dictionary", *sources):
                    check_dictionary(dictionary, report, path=sources[-1],
                                     column=settings.column, scale=scale)
        table = tree.table(check.path)
        tree.take_problems(report, table)
        if table.readable:
            report.findings.extend(deid_checks.table_date_findings(table))
    data_files = [check for check in checks if is_eeg_data(check)]
    _check_one_format_per_recording(report, data_files)
    if not data_files:
        report.error(".", "no EEG data files found (sub-<label>/[ses-<label>/]eeg/"
                     "*_eeg.edf, .bdf, .vhdr or .set)", code="layout.no_data")
    recordings = []
    for done, data in enumerate(data_files, start=1):
        info, events = _check_recording(ctx, data)
        recordings.append((data, info, events))
        report.recordings.append(info)
        if on_file is not None:
            on_file(done, len(data_files))
    if settings.source == "scans":
        _scans_blocks(ctx, recordings, scans)
    else:
        rows = read_phenotype(tree, report, settings=settings, scale=scale,
                              participants=set(folders))
        _phenotype_blocks(ctx, recordings, rows or [])
    for _, info, _ in recordings:
        if len(info.blocks) == 1:
            block = info.blocks[0]
            info.condition, info.rating, info.level = block.condition, block.rating, block.level
    for path in deid_checks.header_files(root):
        report.findings.extend(deid_checks.header_findings(
            root, path, companions=ctx.companions.get(path)))
    _summarise_recommended(ctx, len(recordings))
    _findings_to_problems(report, deid)
    return report

