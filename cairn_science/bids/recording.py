"""Opening one recording of a BIDS dataset with mne-bids, after the checks that make it safe.

Everything that reads a recording (upload validation, quality checks, features, predicting
with a release) goes through :func:`read_recording`: it refuses a header that names a file
outside the recording's folder and any table or sidecar mne-bids may read that is larger than
Cairn reads, before mne opens anything; then it applies Cairn's rule for channels whose
channels.tsv type is ``n/a``.
"""

from __future__ import annotations

import os
import warnings
from pathlib import Path, PurePosixPath
from typing import TYPE_CHECKING

from .channel_types import MISSING, type_for_unknown
from .companions import companion_files
from .limits import (
    MAX_JSON_BYTES,
    table_kind,
    table_limit,
    too_large_message,
    too_many_rows_message,
)
from .readers import read_tsv
from .report import Problem, RefusedFile

if TYPE_CHECKING:
    import mne

    from .limits import TableLimit

CHUNK_BYTES = 1 << 20
# What mne_bids.read_raw_bids (0.20) looks for beside a recording, as (suffix, extension).
MNE_BIDS_SIDECARS = (("eeg", ".json"), ("events", ".tsv"), ("events", ".json"),
                     ("channels", ".tsv"), ("electrodes", ".tsv"), ("coordsystem", ".json"))


class TableTooLarge(RefusedFile):
    """A table or sidecar beside a recording is larger than Cairn reads."""


def _sidecars(root, relpath):
    """The tables and sidecars mne-bids reads for a recording, found as mne-bids finds them
    (participants.tsv, the session's scans.tsv and the matching sidecars)."""
    import mne_bids

    bids_path = mne_bids.get_bids_path_from_fname(root / relpath)
    bids_path.update(root=root)
    found = [root / "participants.tsv", mne_bids.BIDSPath(
        subject=bids_path.subject, session=bids_path.session, suffix="scans",
        extension=".tsv", datatype=None, root=root).fpath]
    for suffix, extension in MNE_BIDS_SIDECARS:
        try:
            match = bids_path.find_matching_sidecar(suffix=suffix, extension=extension,
                                                    on_error="ignore")
        except Exception:  # mne-bids then finds nothing either and reads nothing
            match = None
        if match is not None:
            found.append(Path(match))
    return [path for path in dict.fromkeys(found) if os.path.lexists(path)]


def _rows_past(path, max_rows):
    """The line at which a table passes ``max_rows`` rows, or None; reads in 1 MiB chunks
    and stops there, so memory stays small whatever the file holds."""
    lines = 0
    with open(path, "rb") as handle:
        while chunk := handle.read(CHUNK_BYTES):
            lines += chunk.count(b"\n")
            if lines > max_rows + 1:
                return max_rows + 2
    return None


def check_table_sizes(root: str | os.PathLike, relpath: str, *,
                      table_limits: dict[str, TableLimit] | None = None,
                      max_json_bytes: int = MAX_JSON_BYTES) -> None:
    """Refuse (:class:`TableTooLarge`) the tables and sidecars mne-bids may read for the
    recording ``relpath`` that are links out of the dataset or past their limits
    (``table_limits`` maps kinds of table to :class:`~cairn_science.bids.limits.TableLimit`)."""
    root = Path(root)
    root_real = os.path.realpath(root)
    problems = []
    for path in _sidecars(root, relpath):
        relative = path.relative_to(root).as_posix()
        real = os.path.realpath(path)
        if os.path.commonpath([root_real, real]) != root_real:
            problems.append(Problem(relative, "is a link leading outside the dataset; Cairn "
                                    "does not follow such links. Replace it with a copy of "
                                    "the file itself", code="file.link_outside"))
            continue
        if not os.path.isfile(real):
            continue
        size = os.path.getsize(real)
        if path.suffix == ".json":
            if size > max_json_bytes:
                problems.append(Problem(relative, too_large_message(
                    size, max_json_bytes, "a JSON sidecar"), code="file.too_large"))
            continue
        kind = table_kind(relative)
        limit = table_limit(relative, table_limits)
        if size > limit.max_size_bytes:
            problems.append(Problem(relative, too_large_message(
                size, limit.max_size_bytes, f"{kind} tables"), code="file.too_large"))
            continue
        line = _rows_past(real, limit.max_rows)
        if line is not None:
            problems.append(Problem(relative, too_many_rows_message(limit.max_rows, kind, line),
                                    line=line, code="file.too_many_rows"))
    if problems:
        raise TableTooLarge(problems)


def _apply_unknown_types(raw, bids_path, table_limits):
    """Channels whose channels.tsv type is n/a: EEG when named after a 10-20 electrode
    (mne-bids makes every one of them misc)."""
    channels = bids_path.find_matching_sidecar(suffix="channels", extension=".tsv",
                                               on_error="ignore")
    if channels is None:
        return
    limit = table_limit(str(channels), table_limits)
    table = read_tsv(channels, max_rows=limit.max_rows, max_size_bytes=limit.max_size_bytes)
    eeg = {row["name"].strip() for _, row in table.rows
           if row.get("type", "").strip() == MISSING and "name" in row
           and type_for_unknown(row["name"]) == "EEG"}
    present = {name: "eeg" for name in raw.ch_names if name in eeg}
    if present:
        raw.set_channel_types(present, on_unit_change="ignore")


def read_recording(root: str | os.PathLike, relpath: str, *, preload: bool = True,
                   on_ch_mismatch: str = "raise",
                   table_limits: dict[str, TableLimit] | None = None,
                   max_json_bytes: int = MAX_JSON_BYTES) -> mne.io.BaseRaw:
    """The recording ``relpath`` (POSIX, from the dataset root) as an mne Raw with its BIDS
    sidecars applied, its data loaded when ``preload``.

    Raises :class:`~cairn_science.bids.companions.CompanionError` when its header names a file
    outside its folder and :class:`TableTooLarge` for a table or sidecar past its limit
    (both :class:`~cairn_science.bids.report.RefusedFile`, whose message names the file, line and
    field), before mne opens anything. mne's own errors pass through.
    """
    import mne
    import mne_bids

    root = Path(root)
    relpath = PurePosixPath(relpath).as_posix()
    companion_files(root, relpath)
    check_table_sizes(root, relpath, table_limits=table_limits, max_json_bytes=max_json_bytes)
    bids_path = mne_bids.get_bids_path_from_fname(root / relpath)
    bids_path.update(root=root)
    with warnings.catch_warnings(), mne.utils.use_log_level("ERROR"):
        warnings.simplefilter("ignore")
        raw = mne_bids.read_raw_bids(bids_path, on_ch_mismatch=on_ch_mismatch,
                                     verbose="ERROR")
        _apply_unknown_types(raw, bids_path, table_limits)
        if preload:
            raw.load_data(verbose="ERROR")
    return raw
