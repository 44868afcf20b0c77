"""How large a BIDS table or sidecar Cairn agrees to read, in one place.

Every TSV and JSON file of an upload (and every one mne-bids would read beside a recording)
is measured before it is parsed: first its size on disk, then its rows while reading, which
stop at the limit. A table past its limit is refused with words, so that a channels.tsv of a
million rows cannot grow a worker to gigabytes. The values are generous for real data; each
comment says why.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import PurePosixPath

MiB = 1024 * 1024


@dataclass(frozen=True)
class TableLimit:
    """Ceilings of one kind of table: data rows (the header line not counted) and bytes."""

    max_rows: int
    max_size_bytes: int


TABLE_LIMITS = {
    # The densest EEG caps have 256 to 512 electrodes; with auxiliary, trigger and
    # reference channels a real recording stays under a thousand rows. 10,000 rows is ten
    # times that, and 8 MiB leaves about 800 bytes for each row's description.
    "channels": TableLimit(max_rows=10_000, max_size_bytes=8 * MiB),
    "electrodes": TableLimit(max_rows=10_000, max_size_bytes=8 * MiB),
    # Events can legitimately be many: a marker every 10 ms for 2.7 hours is a million rows,
    # and annotation strings (HED tags) make rows of 100-200 bytes. Parsed, a table at this
    # limit takes several hundred MB of worker memory, the most we accept for one table.
    "events": TableLimit(max_rows=1_000_000, max_size_bytes=200 * MiB),
    # One row per participant, session or data file: consortium datasets have thousands,
    # 100,000 is far above any study we expect.
    "participants": TableLimit(max_rows=100_000, max_size_bytes=64 * MiB),
    "sessions": TableLimit(max_rows=100_000, max_size_bytes=64 * MiB),
    "scans": TableLimit(max_rows=100_000, max_size_bytes=64 * MiB),
    # Phenotype tables and any other table: one row per participant, session or block.
    "other": TableLimit(max_rows=100_000, max_size_bytes=64 * MiB),
}
# JSON sidecars describe a file in a few KB; event dictionaries with HED strings reach a
# few hundred KB. 16 MiB is far above any real sidecar.
MAX_JSON_BYTES = 16 * MiB

TABLE_WORDS = {
    "channels": "a channels table lists each channel of a recording once",
    "electrodes": "an electrodes table lists each electrode once",
    "events": "an events table lists the events of one recording",
    "participants": "participants.tsv lists each participant once",
    "sessions": "a sessions table lists each session of a participant once",
    "scans": "a scans table lists each data file once",
    "other": "a table has one row per participant, session or block",
}


def table_kind(path: str | os.PathLike) -> str:
    """The kind of table a path names: its BIDS suffix (channels, events, ...) or "other"."""
    stem = PurePosixPath(str(path)).name.rsplit(".", 1)[0]
    suffix = stem.rsplit("_", 1)[-1]
    return suffix if suffix in TABLE_LIMITS else "other"


def table_limit(path: str | os.PathLike,
                overrides: dict[str, TableLimit] | None = None) -> TableLimit:
    """The :class:`TableLimit` of a table; ``overrides`` maps kinds to other limits."""
    kind = table_kind(path)
    return (overrides or {}).get(kind) or TABLE_LIMITS[kind]


def show_bytes(n_bytes: int) -> str:
    """A byte count for people: "8 MiB", "41.2 MiB", "812 bytes"."""
    if n_bytes < 1024:
        return f"{n_bytes} bytes"
    value, unit = n_bytes / 1024, "KiB"
    for bigger in ("MiB", "GiB", "TiB"):
        if value < 1024:
            break
        value, unit = value / 1024, bigger
    return f"{value:.1f} {unit}".replace(".0 ", " ")


def too_large_message(size_bytes: int, max_size_bytes: int, what: str) -> str:
    """Words for a file refused by its size, measured before reading."""
    return (f"is {show_bytes(size_bytes)}, more than the {show_bytes(max_size_bytes)} Cairn "
            f"reads for {what}, so it was not read; check that it is the file you meant to "
            "upload (an export that went wrong can repeat rows)")


def too_many_rows_message(max_rows: int, kind: str, line: int) -> str:
    """Words for a table whose reading stopped at ``line``, past ``max_rows`` rows."""
    return (f"holds more than {max_rows:,} rows, the most Cairn reads for {kind} tables "
            f"({TABLE_WORDS[kind]}); reading stopped at line {line}. Check that it is the "
            "file you meant to upload (an export that went wrong can repeat rows)")
