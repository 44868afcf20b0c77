"""pyedflib's shipped test recording, wrapped into BIDS with mne-bids, is read and indexed.

Source: pyedflib 0.1.42 ships ``pyedflib/data/test_generator.edf`` (11 signals at 200 Hz for
600 s, figures checked in FIELD-NOTES.md); mne-bids 0.20 writes it as BIDS (EDF via edfio).
Its EDF+ patient field gives a birth date, which mne carries into the written file.
"""

import datetime
import shutil
from pathlib import Path

import numpy as np
import pytest

from cairn_science.bids.deid import scrub_dataset
from cairn_science.bids.headers import read_edf_header
from cairn_science.bids.validate import validate_dataset
from tests.helpers import PYEDFLIB_MEAS_DATE

pyedflib = pytest.importorskip("pyedflib")
SOURCE = Path(pyedflib.__file__).parent / "data" / "test_generator.edf"


@pytest.fixture
def copy(pyedflib_bids, tmp_path):
    root, relpath = pyedflib_bids
    target = tmp_path / "bids"
    shutil.copytree(root, target)
    return target, relpath


def test_source_file_is_as_described():
    """The shipped file has 11 signals at 200 Hz for 600 s and a birth date in its EDF+
    patient field (pyedflib's test data; bytes 8-88 of the header)."""
    header = read_edf_header(SOURCE)
    labels = [label for label in header.labels if label != "EDF Annotations"]
    assert len(labels) == 11
    assert header.n_records * header.record_duration_s == 600
    assert header.patient.split()[2] == "30-JUN-1969"


def test_accepted_and_indexed_with_scrubbing(copy):
    """Validated with ``deid="scrub"`` the dataset is accepted and indexed as 11 channels at
    200 Hz for 600 s, with the signal labels of the file (pyedflib's test data)."""
    root, relpath = copy
    report = validate_dataset(root, deid="scrub")
    assert report.ok, report.errors
    (info,) = report.recordings
    assert info.path == relpath and info.header_read
    assert (info.n_channels, info.sfreq_hz, info.duration_s) == (11, 200.0, 600.0)
    header = read_edf_header(root / relpath)
    assert info.channel_names == [label for label in header.labels if label != "EDF Annotations"]
    assert info.blocks[0].onset_s == 0 and info.blocks[0].duration_s == 600.0


def test_birth_date_is_refused_then_scrubbed(copy):
    """With ``deid="refuse"`` the birth date in the patient field is an error naming the file
    and field; ``scrub_dataset`` replaces the field with the EDF+ anonymous ``X X X X``,
    changes no other byte, and mne reads the same samples and no birthday from it (EDF+
    specification for the patient subfields; mne's EDF reader)."""
    import mne

    root, relpath = copy
    refused = validate_dataset(root)
    (error,) = [problem for problem in refused.errors if problem.code == "deid.identifier"]
    assert error.path == relpath and error.field == "patient birthdate"
    assert "30-JUN-1969" in error.message
    before = (root / relpath).read_bytes()
    changes = scrub_dataset(root)
    after = (root / relpath).read_bytes()
    assert changes == [{"path": relpath, "field": "patient",
                        "before": before[8:88].decode("ascii").strip(), "after": "X X X X"}]
    assert len(after) == len(before)
    assert after[:8] == before[:8] and after[88:] == before[88:]
    assert after[8:88].decode("ascii").strip() == "X X X X"
    accepted = validate_dataset(root)
    assert accepted.ok, accepted.errors
    assert not [f for f in accepted.findings if f.kind == "identifier"]
    unscrubbed = root.parent / "unscrubbed.edf"
    unscrubbed.write_bytes(before)
    original = mne.io.read_raw_edf(unscrubbed, preload=True, verbose="ERROR")
    scrubbed = mne.io.read_raw_edf(root / relpath, preload=True, verbose="ERROR")
    assert scrubbed.ch_names == original.ch_names
    np.testing.assert_array_equal(scrubbed.get_data(), original.get_data())
    assert scrubbed.info["meas_date"] == PYEDFLIB_MEAS_DATE
    assert original.info["subject_info"]["birthday"] == datetime.date(1969, 6, 30)
    assert "birthday" not in scrubbed.info["subject_info"]


def test_measurement_dates_can_be_removed(copy):
    """``measurement_dates="remove"`` sets the EDF start date to 01.01.85 00.00.00 (the EDF+
    value for an unknown date), drops acq_time from scans.tsv, and the date findings go."""
    root, relpath = copy
    assert {f.kind for f in validate_dataset(root, deid="scrub").findings} == {
        "identifier", "measurement_date"}
    scrub_dataset(root, measurement_dates="remove")
    header = read_edf_header(root / relpath)
    assert (header.startdate, header.starttime) == ("01.01.85", "00.00.00")
    assert header.recording.split()[:2] == ["Startdate", "X"]
    report = validate_dataset(root)
    assert report.ok and report.findings == []
