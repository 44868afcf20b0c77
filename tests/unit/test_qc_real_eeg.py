"""Quality checks on a real recording nobody here made.

Source: MNE-Python testing data, EEGLAB/test_raw.set (32 channels read as EEG, 128 Hz,
238 s; its segments were joined, so it breaks on every channel at once at many moments).
Reference: pyprep 0.9 ``NoisyChannels(raw).find_all_bads(ransac=False)`` on the same raw.
"""

import mne
import numpy as np
import pytest

from cairn_science.qc import QCSettings, run_qc
from cairn_science.qc.signals import welch_spectrum
from tests.real_eeg import EEGLAB_LONG_MAINS_HZ, read_long_recording

#: Channels we may flag that pyprep (ransac off) does not, each with its reason. Empty: on
#: this recording every channel we flag must be one pyprep flags too.
EXPLAINED = {}


@pytest.fixture(scope="module")
def recording():
    return read_long_recording()


@pytest.fixture(scope="module")
def ours(recording):
    """The whole check as the quality task runs it on this recording wrapped as BIDS
    (tests/portal/test_real_recording.py): protocol defaults, every channel "good" in
    channels.tsv, no electrode positions, the declared mains frequency, random_state 0."""
    return run_qc(recording, settings=QCSettings(), power_line_hz=EEGLAB_LONG_MAINS_HZ,
                  site_status={}, positions=None, random_state=0)


@pytest.fixture(scope="module")
def pyprep_bads(recording):
    """pyprep's bad channels by criterion (ransac off).

    Print them with: .venv/bin/python -c "import mne, pyprep; raw = mne.io.read_raw_eeglab(
    '../shared/reference/real-eeg/EEGLAB/test_raw.set', preload=True); n =
    pyprep.NoisyChannels(raw, random_state=0); n.find_all_bads(ransac=False);
    print(n.get_bads(as_dict=True))"
    """
    pyprep = pytest.importorskip("pyprep")
    with mne.utils.use_log_level("ERROR"):
        noisy = pyprep.NoisyChannels(recording.copy(), random_state=0)
        noisy.find_all_bads(ransac=False)
    return noisy.get_bads(as_dict=True)


def test_the_mains_frequency_is_60_hz(recording):
    """The mains frequency given to the checks is read from the recording itself: in its
    Welch spectrum the band within 1 Hz of 60 Hz stands more than 10 dB above the 2-5 Hz
    flanks beside it on the median channel, while 50 Hz does not stand out (less than
    3 dB). Source: MNE-Python testing data, EEGLAB/test_raw.set; the ratio of band to
    flanks is common practice, no source."""
    spectrum = welch_spectrum(recording.get_data(), sfreq_hz=recording.info["sfreq"],
                              window_s=2.0)
    freqs_hz = spectrum.freqs_hz
    power = np.median(spectrum.power, axis=0)

    def excess_db(centre_hz):
        offset = np.abs(freqs_hz - centre_hz)
        band = power[offset <= 1.0].mean()
        flanks = power[(offset >= 2.0) & (offset <= 5.0)].mean()
        return 10 * np.log10(band / flanks)

    assert EEGLAB_LONG_MAINS_HZ == 60.0
    assert excess_db(60.0) > 10.0
    assert excess_db(50.0) < 3.0


def test_breaks_shared_by_all_channels_are_rejected_time_not_bad_channels(ours,
                                                                          pyprep_bads):
    """Before, this recording was judged "not usable": 13 of 32 channels were flagged for
    sudden jumps (the breaks between its joined segments, which every channel makes at once
    but which cleared the per-channel threshold on a few channels only), while pyprep flags
    none of them. Now no channel is flagged for jumps, each break becomes a rejected
    segment with its reason in words, and the verdict is "usable".

    Comparison with pyprep 0.9 (ransac off), whose list is empty on this recording: every
    channel we flag must be one pyprep flags, or be explained in EXPLAINED (empty: our
    flags are a subset of pyprep's, here both empty)."""
    ours_bad = set(ours.bad_channels)
    theirs = set(pyprep_bads["bad_all"])
    unexplained = ours_bad - theirs - set(EXPLAINED)
    assert not unexplained, (sorted(ours_bad), pyprep_bads)
    assert ours.flagged_by("jumps") == []

    jump_words = "sudden jump on many channels at once (a break in the recording or a reset)"
    breaks = [segment for segment in ours.segments if jump_words in segment.reasons]
    assert len(breaks) >= 30
    assert ours.rejected_share < QCSettings().rejected_time_share_review
    assert ours.verdict == "pass", ours.verdict_reasons


def test_breaks_lie_where_most_channels_step_at_once(recording, ours):
    """Each rejected break starts 0.25 s (the margin) before a moment when at least a
    quarter of the channels make a step of at least 4 robust SDs of their own steps (read
    here from the raw samples, independently of the checks' code; breaks closer than twice
    the margin share one segment). Source: MNE-Python testing data, EEGLAB/test_raw.set;
    the share, the bar and the margin are the settings' defaults."""
    data = recording.get_data()
    steps = np.abs(np.diff(data, axis=1))
    centre = np.median(steps, axis=1, keepdims=True)
    scale = 1.4826 * np.median(np.abs(steps - centre), axis=1)
    unusual = steps >= 4.0 * scale[:, None]
    sfreq_hz = recording.info["sfreq"]
    jump_words = "sudden jump on many channels at once (a break in the recording or a reset)"
    breaks = [segment for segment in ours.segments if segment.reasons == [jump_words]]
    assert breaks
    for segment in breaks:
        sample = int(round((segment.onset_s + QCSettings().jump_margin_s) * sfreq_hz))
        together = unusual[:, sample - 2:sample + 1].any(axis=1).mean()
        assert together >= 0.25, (segment, together)
