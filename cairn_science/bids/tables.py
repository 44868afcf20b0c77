"""Checks of the BIDS tables: participants.tsv, channels.tsv, events.tsv and scans.tsv.

Column names, their order and allowed values come from the schema's tabular-data rules;
each check reports on the table once and returns the parsed content the later checks use.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from . import schema
from .channel_types import MISSING, type_for_unknown

COMMON_TYPES = frozenset({"EEG", "EOG", "ECG", "EMG", "MISC", "TRIG", "REF"})


def as_number(text: str) -> float | None:
    """A finite float from a table cell, or None."""
    try:
        value = float(text)
    except (TypeError, ValueError):
        return None
    return value if math.isfinite(value) else None


def _initial_columns(table, report, *, initial, what):
    """Required leading columns in order; returns True when all are present."""
    if table.columns[: len(initial)] == list(initial):
        return True
    missing = [name for name in initial if name not in table.columns]
    if missing:
        report.error(table.path, f"{what} needs the column(s) {', '.join(missing)}; the first "
                     f"columns must be {', '.join(initial)} in that order", line=1,
                     field=missing[0], code="table.missing_column")
        return False
    first_wrong = next(
        name for name, actual in zip(initial, table.columns, strict=False) if name != actual
    )
    report.error(table.path, f"columns are in the wrong order: the first columns must be "
                 f"{', '.join(initial)} (found {', '.join(table.columns[: len(initial)])}); "
                 "reorder them", line=1, field=first_wrong, code="table.column_order")
    return True


def check_participants(tree, report, *, folders) -> dict:
    """Check participants.tsv against the ``sub-*`` folders; return {label: line}."""
    path = "participants.tsv"
    if not tree.exists(path):
        report.warn(path, "missing: recommended, it lists every participant with age, sex "
                    "and other columns described in participants.json", code="file.missing")
        return {}
    table = tree.table(path)
    tree.take_problems(report, table)
    if not table.readable:
        return {}
    initial, _ = schema.table_rule("modality_agnostic", "Participants")
    if not _initial_columns(table, report, initial=initial, what="participants.tsv"):
        return {}
    pattern = schema.column_pattern("participant_id")
    listed = {}
    for line, row in table.rows:
        value = row["participant_id"]
        if not re.fullmatch(pattern, value):
            report.error(path, f"{value!r} is not a participant id; write sub-<label> with "
                         "letters and digits", line=line, field="participant_id",
                         code="participants.bad_id")
            continue
        label = value[4:]
        if label in listed:
            report.error(path, f"{value} is listed twice (first on line {listed[label]}); "
                         "keep one row per participant", line=line, field="participant_id",
                         code="participants.duplicate")
            continue
        listed[label] = line
    for label in folders:
        if label not in listed:
            report.error(path, f"folder sub-{label} has no row here; add a row for "
                         f"sub-{label}", field="participant_id",
                         code="participants.missing_subject")
    for label, line in listed.items():
        if label not in folders:
            report.error(path, f"sub-{label} is listed but the upload has no sub-{label}/ "
                         "folder; remove the row or add the participant's data", line=line,
                         field="participant_id", code="participants.extra_subject")
    return listed


@dataclass
class Channel:
    name: str
    type: str
    status: str
    line: int


def check_channels(tree, report, path: str) -> list | None:
    """Check a channels.tsv; return its named channels, or None when it cannot be compared
    with a data file (no header, wrong columns, or rows that could not be read).

    A type of n/a (BIDS allows n/a in any cell) is a warning, and the channel gets the type
    :func:`~cairn_science.bids.channel_types.type_for_unknown` gives it (EEG or MISC).
    """
    table = tree.table(path)
    tree.take_problems(report, table)
    if not table.readable:
        return None
    initial, required = schema.table_rule("eeg", "EEGChannels")
    if not _initial_columns(table, report, initial=initial, what="channels.tsv"):
        return None
    types = schema.column_enum("type__channels")
    statuses = schema.column_enum("status")
    channels, seen, spaced, unknown = [], {}, [], []
    for line, row in table.rows:
        name = row["name"]
        if not name.strip() or name == MISSING:
            report.error(path, "channel has no name; every row needs the channel's name as "
                         "in the data file", line=line, field="name", code="channels.no_name")
            continue
        if name != name.strip():
            spaced.append((line, name))
        if name.strip() in seen:
            report.error(path, f"channel {name.strip()!r} is listed twice (first on line "
                         f"{seen[name.strip()]}); each channel needs exactly one row",
                         line=line, field="name", code="channels.duplicate")
            continue
        seen[name.strip()] = line
        kind = row["type"]
        if kind.strip() == MISSING:
            kind = type_for_unknown(name)
            unknown.append((line, name.strip()))
        elif kind not in types:
            hint = (f"write it in capitals ({kind.upper()})" if kind.upper() in types
                    else f"use one of {', '.join(sorted(set(types) & COMMON_TYPES))} or "
                    "another type the BIDS standard lists")
            report.error(path, f"channel type {kind!r} is not a BIDS channel type; {hint}",
                         line=line, field="type", code="channels.bad_type")
        for column in required:
            if column not in ("name", "type") and not row[column].strip():
                report.error(path, f"{column} is empty; write the value or n/a", line=line,
                             field=column, code="channels.empty_value")
        status = row.get("status", MISSING)
        if "status" in row and status not in (*statuses, MISSING):
            report.error(path, f"status {status!r} is not allowed; write good, bad or n/a",
                         line=line, field="status", code="channels.bad_status")
        if "status_description" in row and not row["status_description"].strip():
            report.error(path, "status_description is empty; write a reason or n/a",
                         line=line, field="status_description", code="channels.empty_value")
        channels.append(Channel(name.strip(), kind, status, line))
    if unknown:
        _warn_unknown_types(report, path, unknown)
    if spaced:
        line, name = spaced[0]
        report.warn(path, f"{len(spaced)} channel name(s) have spaces around them (first "
                    f"{name!r}); they are compared with the data file without the spaces, "
                    "but remove them", line=line, field="name", code="channels.name_spaces")
    return None if table.unread_rows else channels


def _names(names, *, shown=6):
    more = f" and {len(names) - shown} more" if len(names) > shown else ""
    return ", ".join(names[:shown]) + more


def _warn_unknown_types(report, path, unknown):
    """One warning per table for channels of type n/a, saying what each is treated as."""
    as_eeg = [name for _, name in unknown if type_for_unknown(name) == "EEG"]
    as_misc = [name for _, name in unknown if type_for_unknown(name) != "EEG"]
    treated = []
    if as_eeg:
        treated.append(f"{_names(as_eeg)} are treated as EEG, being 10-20 electrode names")
    if as_misc:
        treated.append(f"{_names(as_misc)} are treated as MISC (left out of EEG quality "
                       "checks and features), not being 10-20 electrode names")
    report.warn(path, f"{len(unknown)} channel(s) have type n/a, so their type is unknown "
                f"(first on line {unknown[0][0]}): {'; '.join(treated)}. Write each "
                "channel's type where you know it", line=unknown[0][0], field="type",
                code="channels.unknown_type")


@dataclass
class Event:
    onset_s: float
    duration_s: float | None
    trial_type: str
    line: int


def check_events(tree, report, path: str) -> list | None:
    """Check an events.tsv; return its events (rows with problems left out) or None.

    An onset of n/a (BIDS allows n/a in any cell) is a warning; the event is left out, as
    mne-bids leaves it out of the recording's annotations.
    """
    table = tree.table(path)
    tree.take_problems(report, table)
    if not table.readable:
        return None
    initial, _ = schema.table_rule("events", "Events")
    if not _initial_columns(table, report, initial=initial, what="events.tsv"):
        return None
    events, unknown_onsets = [], []
    for line, row in table.rows:
        onset = as_number(row["onset"])
        if onset is None and row["onset"].strip() == MISSING:
            unknown_onsets.append(line)
            continue
        if onset is None:
            report.error(path, f"onset {row['onset']!r} is not a number; write the event's "
                         "start in seconds from the beginning of the recording", line=line,
                         field="onset", code="events.bad_onset")
            continue
        raw_duration = row["duration"]
        duration = None
        if raw_duration != MISSING:
            duration = as_number(raw_duration)
            if duration is None or duration < 0:
                words = "is negative" if duration is not None else "is not a number"
                report.error(path, f"duration {raw_duration!r} {words}; write the event's "
                             "length in seconds (0 or more), or n/a if unknown", line=line,
                             field="duration", code="events.bad_duration")
                continue
        trial_type = row.get("trial_type", MISSING)
        if "trial_type" in row and not trial_type.strip():
            report.error(path, "trial_type is empty; write the event's type or n/a",
                         line=line, field="trial_type", code="events.empty_value")
            continue
        events.append(Event(onset, duration, trial_type, line))
    if unknown_onsets:
        report.warn(path, f"{len(unknown_onsets)} event(s) have onset n/a, so when they "
                    f"happened is unknown (first on line {unknown_onsets[0]}); they are left "
                    "out of the checks and of workload blocks. Write the onset in seconds "
                    "where you know it", line=unknown_onsets[0], field="onset",
                    code="events.unknown_onset")
    return events


@dataclass
class ScansRow:
    path: str
    line: int
    row: dict


def check_scans(tree, report, path: str) -> dict:
    """Check a scans.tsv; return {data file path from the root: ScansRow}."""
    table = tree.table(path)
    tree.take_problems(report, table)
    if not table.readable:
        return {}
    initial, _ = schema.table_rule("modality_agnostic", "Scans")
    if not _initial_columns(table, report, initial=initial, what="scans.tsv"):
        return {}
    folder = path.rpartition("/")[0]
    listed = {}
    for line, row in table.rows:
        filename = row["filename"].strip()
        target = f"{folder}/{filename}" if folder else filename
        if not tree.exists(target):
            report.error(path, f"lists {filename!r}, which is not in the upload (file names "
                         "are relative to this table's folder); correct or remove the row",
                         line=line, field="filename", code="scans.missing_file")
            continue
        if target in listed:
            report.error(path, f"{filename} is listed twice (first on line "
                         f"{listed[target].line}); keep one row per file", line=line,
                         field="filename", code="scans.duplicate")
            continue
        listed[target] = ScansRow(path, line, row)
    return listed
