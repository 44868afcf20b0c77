"""The quality checks on pyedflib's shipped test recording.

Source: pyedflib 0.1.42 ships ``pyedflib/data/test_generator.edf`` (11 signals at 200 Hz
for 600 s: square wave, ramp, pulse, noise and sines of 1, 8, 8.1777, 8.5, 15, 17 and
50 Hz; figures checked in FIELD-NOTES.md). The file is not EEG: its signals share nothing,
so most channel checks have no meaning on it. The test checks only what the signals' known
content implies for the mains check with 50 Hz mains.
"""

from pathlib import Path

import pytest

from cairn_science.qc import run_qc

pyedflib = pytest.importorskip("pyedflib")
SOURCE = Path(pyedflib.__file__).parent / "data" / "test_generator.edf"


@pytest.fixture(scope="module")
def result():
    import mne

    raw = mne.io.read_raw_edf(SOURCE, preload=True, verbose="ERROR")
    raw.set_channel_types({name: "eeg" for name in raw.ch_names}, verbose="ERROR")
    return run_qc(raw, power_line_hz=50.0)


def test_sine_50_hz_is_mains_hum(result):
    """A pure 50 Hz sine is all hum: flagged for mains, far above the threshold, with our
    words. Source: pyedflib 0.1.42's test_generator.edf."""
    reasons = {reason.check: reason for reason in result.channels["sine 50 Hz"].reasons}
    assert reasons["mains"].words == "strong mains hum"
    assert reasons["mains"].value > reasons["mains"].threshold + 40.0


@pytest.mark.parametrize("name", ["sine 8 Hz", "sine 8.5 Hz", "sine 15 Hz", "noise"])
def test_signals_without_50_hz_are_not_mains_hum(result, name):
    """Sines far from 50 Hz and broadband noise have no power peak at 50 Hz.
    Source: pyedflib 0.1.42's test_generator.edf."""
    assert "mains" not in {reason.check for reason in result.channels[name].reasons}
    assert result.channels[name].metrics["mains"] < 3.0


def test_file_runs_through_every_check(result):
    """All eleven signals get a status, and the missing electrode positions are said.
    Source: pyedflib 0.1.42's test_generator.edf."""
    assert len(result.channels) == 11
    assert any("no electrode position" in note for note in result.notes)
