"""BIDS tables and sidecars are measured before they are parsed (issue 13: a channels.tsv of
1,000,000 rows grew a worker to 4.3 GB).

The size on disk is checked first and reading stops at the row limit, so a refused table
costs little memory whatever it holds; peaks are measured with tracemalloc (a memory bound,
not a timing). The dataset is the broken corpus' clean base (invented, fixtures.broken_bids).
"""

import json
import shutil
import tracemalloc

import pytest

from cairn_science.bids.limits import TABLE_LIMITS, MiB, TableLimit, table_kind
from cairn_science.bids.readers import read_json, read_tsv
from cairn_science.bids.recording import TableTooLarge, read_recording
from cairn_science.bids.validate import validate_dataset
from fixtures.broken_bids import RUN1_CHANNELS, RUN1_EVENTS, STEM_RUN1, build_clean_dataset

PEAK_BOUND_BYTES = 50 * MiB
RUN1 = f"{STEM_RUN1}_eeg.edf"


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    root = build_clean_dataset(tmp_path_factory.mktemp("bounds") / "clean")
    validate_dataset(root)  # imports mne, mne-bids and the schema before anything is measured
    return root


@pytest.fixture
def dataset(clean, tmp_path):
    root = tmp_path / "dataset"
    shutil.copytree(clean, root)
    return root


def _write_rows(path, n_rows, row):
    """A table of ``n_rows`` rows written in blocks (the test itself stays small)."""
    with open(path, "w", encoding="utf-8") as handle:
        handle.write("name\ttype\tunits\n")
        for start in range(0, n_rows, 10_000):
            handle.write("".join(row(i) for i in range(start, min(n_rows, start + 10_000))))


def _peak(call):
    tracemalloc.start()
    try:
        result = call()
        return result, tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_a_million_row_channels_table_is_refused_by_its_size(dataset):
    """1,000,000 channel rows (18,000,016 bytes) are refused on their size before parsing, by
    validation and by the recording reader, with the file, the limit, what was found and
    what to do; peak memory stays under 50 MB (issue 13)."""
    path = dataset / RUN1_CHANNELS
    _write_rows(path, 1_000_000, lambda i: f"EEG{i:07d}\tEEG\tuV\n")
    assert path.stat().st_size == 18_000_016
    report, peak = _peak(lambda: validate_dataset(dataset))
    assert peak < PEAK_BOUND_BYTES
    (error,) = [e for e in report.errors if e.path == RUN1_CHANNELS]
    assert error.code == "file.too_large"
    assert "is 17.2 MiB, more than the 8 MiB Cairn reads for channels tables" in error.message
    assert "check that it is the file you meant to upload" in error.message
    with pytest.raises(TableTooLarge, match="8 MiB") as caught:
        read_recording(dataset, RUN1)
    assert caught.value.problems[0].path == RUN1_CHANNELS


def test_reading_stops_at_the_row_limit(dataset):
    """500,000 short rows fit under the byte limit (7.5 MB), so the reader must stop at row
    10,001 instead of parsing them all; peak memory stays under 50 MB (issue 13)."""
    path = dataset / RUN1_CHANNELS
    _write_rows(path, 500_000, lambda i: f"C{i:06d}\tEEG\tuV\n")
    assert path.stat().st_size < TABLE_LIMITS["channels"].max_size_bytes
    table, peak = _peak(lambda: read_tsv(path, relpath=RUN1_CHANNELS))
    assert peak < PEAK_BOUND_BYTES
    assert not table.readable and table.rows == []
    (error,) = table.errors
    assert (error.code, error.line) == ("file.too_many_rows", 10_002)
    assert "more than 10,000 rows" in error.message and "line 10002" in error.message
    report, peak = _peak(lambda: validate_dataset(dataset))
    assert peak < PEAK_BOUND_BYTES
    assert [e.line for e in report.errors if e.path == RUN1_CHANNELS] == [10_002]
    with pytest.raises(TableTooLarge, match="more than 10,000 rows"):
        read_recording(dataset, RUN1)


def test_limits_are_keyword_parameters(dataset):
    """The limits can be given per call (rows, bytes) and per kind of table for a whole
    validation (plumbing)."""
    events = dataset / RUN1_EVENTS
    n_rows = len(events.read_text(encoding="utf-8").splitlines()) - 1
    assert read_tsv(events, relpath=RUN1_EVENTS, max_rows=n_rows).readable
    short = read_tsv(events, relpath=RUN1_EVENTS, max_rows=n_rows - 1)
    assert [(e.code, e.line) for e in short.errors] == [("file.too_many_rows", n_rows + 1)]
    small = read_tsv(events, relpath=RUN1_EVENTS, max_size_bytes=10)
    assert [e.code for e in small.errors] == ["file.too_large"]
    report = validate_dataset(dataset, table_limits={
        "events": TableLimit(max_rows=1_000_000, max_size_bytes=10)})
    assert {e.path for e in report.errors if e.code == "file.too_large"} >= {RUN1_EVENTS}
    assert validate_dataset(dataset).ok


def test_each_kind_of_table_has_its_limit():
    """Tables are limited by their BIDS suffix; events may be far larger than channels
    (a million rows) and any other table gets the general limit (plumbing)."""
    assert table_kind("sub-01/eeg/sub-01_task-x_channels.tsv") == "channels"
    assert table_kind("participants.tsv") == "participants"
    assert table_kind("sub-01/sub-01_scans.tsv") == "scans"
    assert table_kind("phenotype/workload.tsv") == "other"
    assert TABLE_LIMITS["events"].max_rows >= 1_000_000
    assert TABLE_LIMITS["channels"].max_rows >= 1_000


def test_a_large_real_events_table_is_read(dataset):
    """An events table of 200,000 rows, as a long recording with frequent markers has, stays
    within the events limit and is read whole (common practice, no source)."""
    path = dataset / RUN1_EVENTS
    with open(path, "w", encoding="utf-8") as handle:
        handle.write("onset\tduration\ttrial_type\n")
        handle.write("".join(f"{i * 0.01:.2f}\t0\tmarker\n" for i in range(200_000)))
    table = read_tsv(path, relpath=RUN1_EVENTS)
    assert table.errors == [] and len(table.rows) == 200_000


def test_oversized_sidecars_and_participants_are_not_read(dataset):
    """A JSON sidecar past 16 MiB and a participants.tsv past 64 MiB (sparse files: nothing
    is written) are refused by validation and by the recording reader without reading
    them (issue 13)."""
    sidecar = dataset / f"{STEM_RUN1}_eeg.json"
    with open(sidecar, "r+b") as handle:
        handle.truncate(17 * MiB)
    document, peak = _peak(lambda: read_json(sidecar))
    assert peak < PEAK_BOUND_BYTES
    assert [e.code for e in document.errors] == ["file.too_large"]
    with open(dataset / "participants.tsv", "r+b") as handle:
        handle.truncate(65 * MiB)
    report = validate_dataset(dataset)
    refused = {e.path for e in report.errors if e.code == "file.too_large"}
    assert {"participants.tsv", f"{STEM_RUN1}_eeg.json"} <= refused
    with pytest.raises(TableTooLarge) as caught:
        read_recording(dataset, RUN1)
    assert {p.path for p in caught.value.problems} == refused
    assert json.dumps([p.message for p in caught.value.problems]).count("MiB") >= 4
