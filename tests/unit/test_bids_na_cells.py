"""``n/a`` in BIDS table cells is accepted with a warning saying how Cairn treats it (issue 14).

BIDS allows n/a in any table cell (BIDS specification, common principles, tabular files; from
memory). A channel of type n/a is treated as EEG when its name is an electrode of MNE's 10-20
template montage, else as MISC; an event with onset n/a is left out, as mne-bids leaves it out
(mne_bids.read drops n/a onsets).
"""

import os
import shutil
from pathlib import Path

import pytest

from cairn_science.bids.channel_types import type_for_unknown
from cairn_science.bids.recording import read_recording
from cairn_science.bids.validate import validate_dataset
from fixtures.broken_bids import RUN1_CHANNELS, RUN1_EVENTS, STEM_RUN1, build_clean_dataset
from tests.helpers import skip_or_fail

REAL = Path(os.environ.get("CAIRN_REAL_EEG", Path(__file__).resolve().parents[3] / "shared"
                           / "reference" / "real-eeg"))
RUN1 = f"{STEM_RUN1}_eeg.edf"


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    return build_clean_dataset(tmp_path_factory.mktemp("na") / "clean")


@pytest.fixture
def dataset(clean, tmp_path):
    return shutil.copytree(clean, tmp_path / "dataset")


def _set_column(path, column, value, *, rows=None):
    """Write ``value`` in ``column`` of the given data rows (0-based; all when None)."""
    lines = path.read_text(encoding="utf-8").split("\n")
    header = lines[0].split("\t")
    index = header.index(column)
    for number in range(1, len(lines)):
        if lines[number] and (rows is None or number - 1 in rows):
            values = lines[number].split("\t")
            values[index] = value
            lines[number] = "\t".join(values)
    path.write_text("\n".join(lines), encoding="utf-8")


def test_unknown_type_follows_the_10_20_names():
    """Names of MNE's 10-20 template (colin27_1020, formerly standard_1020), in any case,
    classic (T3) or modern (T7), are EEG; amplifier labels are MISC."""
    assert [type_for_unknown(name) for name in ("Fp1", "fp1 ", "T3", "T7", "POz", "Iz")] == \
        ["EEG"] * 6
    assert [type_for_unknown(name) for name in ("EXG1", "GSR1", "EEG 000", "Status", "1")] == \
        ["MISC"] * 5


def test_channels_of_unknown_type_are_read_as_the_warning_says(dataset):
    """Two channels of type n/a in a recording that is read: accepted with one warning
    naming the file, line and what they are treated as; the recording reader makes them EEG,
    where mne-bids alone makes them misc (mne_bids.read: unknown types become misc)."""
    import mne_bids

    _set_column(dataset / RUN1_CHANNELS, "type", "n/a", rows={0, 2})
    report = validate_dataset(dataset)
    assert report.ok, report.errors
    (warning,) = [w for w in report.warnings if w.code == "channels.unknown_type"]
    assert (warning.path, warning.line, warning.field) == (RUN1_CHANNELS, 2, "type")
    assert "2 channel(s) have type n/a" in warning.message
    assert "Fp1, C3 are treated as EEG" in warning.message
    raw = read_recording(dataset, RUN1, preload=False)
    assert set(raw.get_channel_types()) == {"eeg"}
    alone = mne_bids.read_raw_bids(mne_bids.get_bids_path_from_fname(dataset / RUN1),
                                   verbose="error")
    assert [alone.get_channel_types()[i] for i in (0, 2)] == ["misc", "misc"]


def test_real_channels_of_unknown_type_are_misc(tmp_path):
    """MNE-Python testing data, EEGLAB/test_raw.set (channels 'EEG 000' to 'EEG 031'),
    written as BIDS by mne-bids with every channel type n/a: accepted with a warning that
    they are treated as MISC, and read as misc (mains frequency invented: 50 Hz)."""
    import mne
    import mne_bids

    source = REAL / "EEGLAB" / "test_raw.set"
    if not source.is_file():
        skip_or_fail(f"MNE-Python's test recordings are not at {REAL}")
    raw = mne.io.read_raw_eeglab(source, verbose="error")
    raw.info["line_freq"] = 50.0
    path = mne_bids.BIDSPath(root=tmp_path, subject="01", task="x", datatype="eeg")
    mne_bids.write_raw_bids(raw, path, overwrite=True, verbose="error")
    channels = path.copy().update(suffix="channels", extension=".tsv").fpath
    _set_column(channels, "type", "n/a")
    report = validate_dataset(tmp_path)
    assert report.ok, report.errors
    (warning,) = [w for w in report.warnings if w.code == "channels.unknown_type"]
    assert warning.message.startswith("32 channel(s) have type n/a")
    assert "EEG 000, EEG 001" in warning.message and "are treated as MISC" in warning.message
    data = path.copy().update(suffix="eeg", extension=".set").fpath.relative_to(tmp_path)
    read = read_recording(tmp_path, data.as_posix(), preload=False)
    assert set(read.get_channel_types()) == {"misc"}


def test_events_with_unknown_onset_are_left_out(dataset):
    """An event whose onset is n/a is a warning, and left out of the events Cairn uses."""
    _set_column(dataset / RUN1_EVENTS, "onset", "n/a", rows={0})
    report = validate_dataset(dataset)
    assert report.ok, report.errors
    (warning,) = [w for w in report.warnings if w.code == "events.unknown_onset"]
    assert (warning.path, warning.line, warning.field) == (RUN1_EVENTS, 2, "onset")
    assert "1 event(s) have onset n/a" in warning.message
