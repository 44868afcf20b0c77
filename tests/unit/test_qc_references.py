"""The quality checks against reference libraries: pyprep where it covers a check, mne where
it does not.

Recordings are built with the demo generator's signal model (spatially smooth background,
rhythms, blinks), mains hum switched off, and faults injected here.
"""

import contextlib
import dataclasses
import io
import logging

import mne
import numpy as np
import pytest
from scipy import signal

from cairn_science.qc import QCSettings, run_qc
from fixtures.demo import SITES
from fixtures.demo.bids_output import build_raw
from fixtures.demo.protocol import draw_person
from fixtures.demo.signals import colored_noise, simulate_recording
from tests.helpers import demo_recordings

pytestmark = pytest.mark.filterwarnings("ignore")

DURATION_S = 60.0
RECORDING_SEEDS = (301, 302)
# Our settings set to PREP's values where our defaults differ (see QCSettings).
PREP_VALUES = QCSettings(correlation_window_s=1.0, correlation_bad_window_share=0.01,
                         deviation_ratio_min=1.0,
                         deviation_factor_max=0.0, hf_ratio_min=1.0,
                         check_predictability=False)


def _clean(site, *, seed, duration_s=DURATION_S, condition="low"):
    """A clean recording of ``site`` without mains hum, as the demo writes it (Raw)."""
    site = dataclasses.replace(site, mains_uv=0.0)
    person = draw_person(participant_id=f"sub-{seed}", rng=np.random.default_rng(seed))
    data_v, _, _ = simulate_recording(
        ch_names=site.ch_names, sfreq_hz=site.sfreq_hz,
        n_times=int(round(duration_s * site.sfreq_hz)), condition=condition, person=person,
        site=site, channel_fault_kinds=(), with_bad_segments=False,
        signal_rng=np.random.default_rng(seed + 1), fault_rng=np.random.default_rng(seed + 2),
    )
    raw = build_raw(data_v=data_v, site=site, condition=condition, block_s=duration_s,
                    meas_date=None)
    return raw, person


def _with_faults(raw, *, person, seed):
    """Six channel faults: one of each kind pyprep looks for, and a channel at a tenth of its
    amplitude (which PREP's deviation misses when amplitudes spread widely); returns
    (Raw, {name: kind})."""
    data = raw.get_data()
    sfreq_hz = raw.info["sfreq"]
    n_channels, n_times = data.shape
    rng = np.random.default_rng(seed + 3)
    picks = rng.choice(n_channels, 6, replace=False)
    rms_v = float(np.median(data.std(axis=1)))
    data[picks[0]] = 0.0
    start = int(20.0 * sfreq_hz)
    data[picks[1], start : start + int(2.0 * sfreq_hz)] = np.nan
    sos = signal.butter(8, min(55.0, 0.42 * sfreq_hz), "highpass", fs=sfreq_hz, output="sos")
    hiss = signal.sosfiltfilt(sos, rng.standard_normal(n_times))
    data[picks[2]] += 0.5 * rms_v * hiss / hiss.std()
    data[picks[3]] = rms_v * colored_noise(
        n_signals=1, n_times=n_times, sfreq_hz=sfreq_hz, exponent=person.spectral_exponent,
        knee_hz=25.0, rng=rng,
    )[0]
    data[picks[4]] *= 4.0
    data[picks[5]] *= 0.1
    kinds = ("flat", "nan", "hf", "unrelated", "large", "small")
    faults = {raw.ch_names[index]: kind for index, kind in zip(picks, kinds, strict=True)}
    return mne.io.RawArray(data, raw.info, verbose="ERROR"), faults


def _pyprep(raw):
    import pyprep

    logging.getLogger("pyprep").setLevel(logging.ERROR)
    with contextlib.redirect_stderr(io.StringIO()):
        noisy = pyprep.NoisyChannels(raw.copy(), random_state=0, ransac=False)
        noisy.find_all_bads(ransac=False)
    return noisy


@pytest.fixture(scope="module")
def faulty_recordings():
    recordings = []
    for site in SITES:
        for seed in RECORDING_SEEDS:
            raw, person = _clean(site, seed=seed)
            recordings.append((site, seed, *_with_faults(raw, person=person, seed=seed)))
    return recordings


def test_agreement_with_pyprep(faulty_recordings):
    """Source: pyprep 0.9.0, ``NoisyChannels(raw).find_all_bads(ransac=False)`` and its
    ``bad_by_*`` lists. With our thresholds set to PREP's values, on six recordings of the
    three sites without mains hum, the channels pyprep flags by deviation, correlation and
    high-frequency noise are exactly those we flag for the same reason, and its flat and NaN
    channels exactly our no-signal channels. pyprep must also find every injected fault but
    the weak channel by the criterion it was made for, so that the comparison is not empty.
    """
    expected = {"flat": "bad_by_flat", "nan": "bad_by_nan", "hf": "bad_by_hf_noise",
                "unrelated": "bad_by_correlation", "large": "bad_by_deviation"}
    for site, seed, raw, faults in faulty_recordings:
        reference = _pyprep(raw).get_bads(as_dict=True)
        for name, kind in faults.items():
            if kind in expected:
                assert name in reference[expected[kind]], (site.slug, seed, name, kind)
        ours = run_qc(raw, settings=PREP_VALUES, power_line_hz=None)
        theirs = {
            "dropout": reference["bad_by_flat"] + reference["bad_by_nan"]
            + reference["bad_by_dropout"],
            "deviation": reference["bad_by_deviation"],
            "high_frequency": reference["bad_by_hf_noise"],
            "correlation": reference["bad_by_correlation"],
        }
        for check, names in theirs.items():
            assert set(ours.flagged_by(check)) == set(names), (site.slug, seed, check)


def test_defaults_flag_the_injected_faults(faulty_recordings):
    """Source: pyprep 0.9.0 as above. With our default thresholds every injected channel is
    found, the weak one too, and every other channel we flag pyprep flags as well (our
    defaults only add guards against false alarms)."""
    for site, seed, raw, faults in faulty_recordings:
        ours = set(run_qc(raw, power_line_hz=None).bad_channels)
        assert set(faults) <= ours, (site.slug, seed)
        assert ours - set(faults) <= set(_pyprep(raw).get_bads()), (site.slug, seed)


def _intervals(pairs, *, join_gap_s=0.0):
    """Sorted (start, stop) intervals with those closer than ``join_gap_s`` joined."""
    joined = []
    for start, stop in sorted(pairs):
        if joined and start - joined[-1][1] <= join_gap_s:
            joined[-1][1] = max(joined[-1][1], stop)
        else:
            joined.append([start, stop])
    return [tuple(pair) for pair in joined]


def _covered(intervals, by):
    """Share of the total length of ``intervals`` that lies inside ``by``."""
    total = sum(stop - start for start, stop in intervals)
    inside = sum(max(0.0, min(stop, b) - max(start, a))
                 for start, stop in intervals for a, b in by)
    return inside / total if total else 1.0


def _segments_with(result, words):
    return [(s.onset_s, s.onset_s + s.duration_s) for s in result.segments if words in s.reasons]


@pytest.fixture(scope="module")
def demo_raws(demo_small):
    """Every small-demo recording read with mne-bids, its mains frequency and our result."""
    out = []
    for record, raw, mains_hz in demo_recordings(demo_small):
        out.append((record, raw, run_qc(raw, power_line_hz=mains_hz)))
    return out


def test_bridging_agrees_with_mne(demo_raws):
    """Source: mne 1.13 ``mne.preprocessing.compute_bridged_electrodes`` (given 2 s fixed-
    length epochs, as its documentation describes for Raw input). On all 36 small-demo
    recordings the pairs it reports are exactly our near-identical neighbour pairs."""
    n_pairs = 0
    for record, raw, result in demo_raws:
        epochs = mne.make_fixed_length_epochs(raw, duration=2.0, preload=True, verbose="ERROR")
        indices, _ = mne.preprocessing.compute_bridged_electrodes(epochs, verbose="ERROR")
        theirs = {frozenset((raw.ch_names[i], raw.ch_names[j])) for i, j in indices}
        ours = {frozenset((name, reason.words.removeprefix("nearly identical to ")))
                for name, channel in result.channels.items() for reason in channel.reasons
                if reason.check == "bridging"}
        assert ours == theirs, record["path"]
        n_pairs += len(ours)
    assert n_pairs >= 3


def test_muscle_segments_agree_with_mne(demo_raws):
    """Source: mne 1.13 ``mne.preprocessing.annotate_muscle_zscore`` (threshold 4, its
    default; band 30-100 Hz, our muscle band). On the small-demo recordings sampled at 250 Hz
    or more: at least 80 % of mne's muscle time lies in our muscle segments, at least 80 % of
    ours lies within one window (1 s) of mne's, and where mne finds none we find none. mne
    intervals shorter than 0.25 s are left out: they are below the resolution of our 1 s
    windows, and mne's summed z-score crosses 4 that briefly in clean recordings too."""
    n_compared = 0
    for record, raw, result in demo_raws:
        if raw.info["sfreq"] < 250:
            continue
        annotations, _ = mne.preprocessing.annotate_muscle_zscore(
            raw, threshold=4, filter_freq=(30.0, 100.0), verbose="ERROR"
        )
        theirs = _intervals([(a["onset"], a["onset"] + a["duration"]) for a in annotations
                             if a["duration"] >= 0.25])
        ours = _segments_with(result, "muscle activity")
        n_compared += _assert_segments_agree(theirs, ours, record["path"])
    assert n_compared >= 3


def _assert_segments_agree(theirs, ours, where):
    """80 % of mne's time inside ours and 80 % of ours within 1 s of mne's; none where mne
    finds none. Returns 1 if there was something to compare."""
    if not theirs:
        assert ours == [], where
        return 0
    widened = [(start - 1.0, stop + 1.0) for start, stop in theirs]
    assert _covered(theirs, ours) >= 0.8, (where, theirs, ours)
    assert _covered(ours, widened) >= 0.8, (where, theirs, ours)
    return 1


def test_amplitude_segments_agree_with_mne(demo_raws):
    """Source: mne 1.13 ``mne.preprocessing.annotate_amplitude`` with ``peak`` = 100 uV
    (it marks samples whose step from the previous one reaches ``peak``; parts closer than
    1 s are joined here), on the channels we keep (our bad channels set in info["bads"]).
    Same tolerance as for muscle: 80 % of mne's time in our large-amplitude segments, 80 %
    of ours within 1 s of mne's, none where mne finds none."""
    n_compared = 0
    for record, raw, result in demo_raws:
        marked = raw.copy()
        marked.info["bads"] = result.bad_channels
        annotations, _ = mne.preprocessing.annotate_amplitude(
            marked, peak=100e-6, bad_percent=100.0, verbose="ERROR"
        )
        theirs = _intervals([(a["onset"], a["onset"] + a["duration"]) for a in annotations],
                            join_gap_s=1.0)
        ours = _segments_with(result, "very large amplitude")
        n_compared += _assert_segments_agree(theirs, ours, record["path"])
    assert n_compared >= 5


def test_no_signal_agrees_with_mne_flat_annotation():
    """Source: mne 1.13 ``mne.preprocessing.annotate_amplitude`` with ``flat`` (runs of at
    least ``min_duration`` whose sample-to-sample steps stay at or below ``flat``), which
    is our no-signal definition; pyprep 0.9.0 does not report zero stretches inside a
    channel as dropout once its filters have smeared them. Per channel, mne's flat share of
    time equals ours within one sample per flat run (its annotations span the steps between
    the samples of a run, one fewer than the samples), and its bad channels (flat for at
    least 1 %) are our no-signal channels."""
    raw, _ = _clean(SITES[1], seed=303)
    data = raw.get_data()
    sfreq_hz = raw.info["sfreq"]
    data[3] = 0.0
    for start_s in (5.0, 25.0, 45.0):
        start = int(start_s * sfreq_hz)
        data[10, start : start + int(2.0 * sfreq_hz)] = data[10, start]
    data[20, 1000 : 1000 + int(0.3 * sfreq_hz)] = 0.0
    raw = mne.io.RawArray(data, raw.info, verbose="ERROR")
    settings = QCSettings()
    result = run_qc(raw, settings=settings, power_line_hz=None)

    flat_v = settings.flat_step_uv * 1e-6
    shares = {}
    for name in raw.ch_names:
        annotations, bads = mne.preprocessing.annotate_amplitude(
            raw, flat=flat_v, min_duration=settings.dropout_min_s, bad_percent=100.0,
            picks=[name], verbose="ERROR",
        )
        flat_time = sum(a["duration"] for a in annotations)
        shares[name] = 1.0 if bads else flat_time / (raw.n_times / sfreq_hz)
    runs = {raw.ch_names[10]: 3, raw.ch_names[20]: 1}
    for name, channel in result.channels.items():
        tolerance = runs.get(name, 0) / raw.n_times + 1e-12
        assert abs(channel.metrics["dropout"] - shares[name]) <= tolerance, name
    _, bads = mne.preprocessing.annotate_amplitude(
        raw, flat=flat_v, min_duration=settings.dropout_min_s,
        bad_percent=100 * settings.dropout_share_max, verbose="ERROR",
    )
    assert set(result.flagged_by("dropout")) == set(bads) == {raw.ch_names[3], raw.ch_names[10]}
