"""Unit tests of the single quality checks, the settings, the result and the verdict, on
small synthetic arrays whose faults are known by construction (common practice, no
source, unless a test names one)."""

import dataclasses
import json

import mne
import numpy as np
import pytest

from cairn_science.qc import (
    CODE_VERSION,
    QCSettings,
    check_amplitude_factor,
    check_bridging,
    check_correlation,
    check_deviation,
    check_dropout,
    check_high_frequency,
    check_mains,
    check_predictability,
    count_blinks,
    no_signal_mask,
    run_qc,
    run_qc_array,
)
from cairn_science.qc.checks import broadband_factor, check_jumps, find_jumps
from cairn_science.qc.positions import (
    nearest_neighbours,
    on_unit_sphere,
    resolve_positions,
    spline_interpolation_matrix,
    template_position,
)
from cairn_science.qc.signals import highpass, lowpass, welch_spectrum
from cairn_science.qc.verdict import decide_verdict, effective_verdict
from fixtures.demo import SITES
from fixtures.demo.protocol import draw_person
from fixtures.demo.signals import simulate_recording

SFREQ_HZ = 250.0
NAMES_16 = ("Fp1 Fp2 F3 Fz F4 FCz C3 Cz C4 T7 T8 P3 Pz P4 O1 O2").split()
UV = 1e-6


def _pink(n_signals, n_times, rng):
    """Unit-variance noise with power falling as 1/f above 1 Hz."""
    freqs = np.fft.rfftfreq(n_times, d=1.0 / SFREQ_HZ)
    shape = 1.0 / np.sqrt(np.maximum(freqs, 1.0))
    spectrum = rng.standard_normal((n_signals, freqs.size)) + 1j * rng.standard_normal(
        (n_signals, freqs.size))
    out = np.fft.irfft(spectrum * shape, n=n_times, axis=-1)
    return out / out.std(axis=-1, keepdims=True)


def _eeg(*, n_channels=16, seconds=30.0, seed=0, independent=0.3):
    """Channels sharing one 1/f signal (different gains) plus independent 1/f noise, volts."""
    rng = np.random.default_rng(seed)
    n_times = int(seconds * SFREQ_HZ)
    common = _pink(1, n_times, rng)
    gains = rng.uniform(0.9, 1.1, size=(n_channels, 1))
    own = _pink(n_channels, n_times, rng)
    return 10 * UV * (gains * common + independent * own)


def _reference(n_channels):
    return np.ones(n_channels, dtype=bool)


def _spectrum(data):
    return welch_spectrum(data, sfreq_hz=SFREQ_HZ, window_s=2.0)


def test_dropout_finds_flat_channel_nan_stretch_and_held_value():
    """A zero channel, a 3 s NaN stretch and a 2 s held value are no signal for their true
    share of time; a run shorter than the minimum is not; sound channels have none.
    Source: common practice, no source."""
    data = _eeg()
    n_times = data.shape[1]
    data[0] = 0.0
    data[1, 1000:1750] = np.nan
    data[2, 2000:2500] = data[2, 2000]
    data[3, 3000:3010] = data[3, 3000]
    outcome = check_dropout(data, sfreq_hz=SFREQ_HZ, flat_step_v=0.01 * UV, min_run_s=0.1,
                            share_max=0.01)
    assert outcome.values[0] == 1.0
    assert outcome.values[1] == pytest.approx(750 / n_times)
    assert outcome.values[2] == pytest.approx(500 / n_times)
    assert outcome.values[3] == 0.0
    assert np.all(outcome.values[4:] == 0.0)
    assert outcome.flagged.tolist() == [True, True, True] + [False] * 13


def test_no_signal_mask_marks_the_run_itself():
    """A 0.4 s held value is marked sample by sample, nothing else is. Source: common
    practice, no source."""
    data = _eeg(n_channels=2, seconds=4.0)
    data[1, 100:200] = 5 * UV
    mask = no_signal_mask(data, sfreq_hz=SFREQ_HZ, flat_step_v=0.01 * UV, min_run_s=0.1)
    assert not mask[0].any()
    assert np.flatnonzero(mask[1]).tolist() == list(range(100, 200))


def test_deviation_and_amplitude_factor_flag_large_and_small_channels():
    """Robust z of the IQR amplitude (PREP definition): a channel at 5 times the amplitude
    scores far above 5; the broadband factor rule flags it too, and a tenth of the
    amplitude as well, reporting the factor and the bound it passed.
    Source: common practice, no source."""
    data = _eeg()
    data[4] *= 5.0
    data[9] *= 0.1
    drift_free = highpass(data, sfreq_hz=SFREQ_HZ, l_freq_hz=1.0)
    reference = _reference(16)
    factor = broadband_factor(_spectrum(data), reference=reference, l_freq_hz=1.0,
                              h_freq_hz=45.0)
    assert factor[4] == pytest.approx(5.0, rel=0.1)
    assert factor[9] == pytest.approx(0.1, rel=0.1)
    outcome = check_deviation(drift_free, reference=reference, z_max=5.0, ratio_min=1.5,
                              factor=factor)
    assert outcome.values[4] > 5.0
    assert outcome.flagged[4]
    by_factor = check_amplitude_factor(factor, factor_max=3.0)
    assert np.flatnonzero(by_factor.flagged).tolist() == [4, 9]
    np.testing.assert_array_equal(by_factor.values, factor)
    assert by_factor.threshold_for(4) == 3.0
    assert by_factor.threshold_for(9) == pytest.approx(1 / 3)
    assert by_factor.words(4) == "amplitude over 3 times the others'"
    assert by_factor.words(9) == "amplitude under 1/3 of the others'"


def test_a_channel_caught_by_the_amplitude_factor_alone_reports_that_rule():
    """Amplitudes spread widely (gains from 0.5 to 2): a channel at a fifth of the others'
    amplitude has an IQR-based z well above -5, so PREP's deviation rule passes it, and only
    the broadband factor rule flags it. Its reason names that rule with the factor (about
    0.2) and the bound 1/3, not the deviation z; its metrics hold both.
    Source: common practice, no source."""
    rng = np.random.default_rng(11)
    data = _eeg(seconds=90.0, seed=11)
    data *= np.linspace(0.5, 2.0, 16)[rng.permutation(16)][:, None]
    data[6] = 0.2 * data[6] / data[6].std() * np.median(data.std(axis=1))
    result = run_qc_array(data, sfreq_hz=SFREQ_HZ, ch_names=NAMES_16, power_line_hz=50.0)
    channel = result.channels["C3"]
    assert channel.status == "bad"
    assert [reason.check for reason in channel.reasons] == ["amplitude_factor"]
    reason = channel.reasons[0]
    assert reason.value == pytest.approx(0.2, rel=0.15)
    assert reason.value == channel.metrics["amplitude_factor"]
    assert reason.threshold == pytest.approx(1 / 3)
    assert reason.words == "amplitude under 1/3 of the others'"
    assert abs(channel.metrics["deviation"]) < 5.0
    assert result.bad_channels == ["C3"]


def test_deviation_guard_spares_a_strong_regional_rhythm():
    """A strong 6 Hz rhythm on one channel lifts its IQR amplitude z above 5 (PREP flags
    it), but its broadband factor stays near 1, so our guard keeps it.
    Source: common practice, no source."""
    data = _eeg()
    times_s = np.arange(data.shape[1]) / SFREQ_HZ
    data[3] += 25 * UV * np.sin(2 * np.pi * 6.0 * times_s)
    drift_free = highpass(data, sfreq_hz=SFREQ_HZ, l_freq_hz=1.0)
    reference = _reference(16)
    prep_rule = check_deviation(drift_free, reference=reference, z_max=5.0)
    assert prep_rule.flagged[3]
    factor = broadband_factor(_spectrum(data), reference=reference, l_freq_hz=1.0,
                              h_freq_hz=45.0)
    assert factor[3] < 1.5
    guarded = check_deviation(drift_free, reference=reference, z_max=5.0, ratio_min=1.5,
                              factor=factor)
    assert not guarded.flagged.any()


def test_deviation_needs_the_factor_for_its_guard():
    """The guard cannot run without the broadband factor and says so.
    Source: common practice, no source."""
    data = _eeg(n_channels=4, seconds=4.0)
    with pytest.raises(ValueError, match="broadband factor"):
        check_deviation(data, reference=_reference(4), ratio_min=1.5)


def _hiss(n_times, *, l_freq_hz, rng):
    noise = highpass(rng.standard_normal((1, n_times)), sfreq_hz=SFREQ_HZ, l_freq_hz=l_freq_hz)
    return noise[0] / noise.std()


def test_high_frequency_noise_flags_hiss_above_50_hz():
    """Noise above 55 Hz at half the EEG amplitude gives the noise ratio a large robust z;
    the other channels stay near 0. Source: common practice, no source."""
    data = _eeg()
    data[6] += 5 * UV * _hiss(data.shape[1], l_freq_hz=55.0, rng=np.random.default_rng(1))
    outcome = check_high_frequency(_spectrum(data), sfreq_hz=SFREQ_HZ, reference=_reference(16),
                             power_line_hz=50.0, ratio_min=1.5)
    assert outcome.note is None
    assert np.flatnonzero(outcome.flagged).tolist() == [6]


def test_high_frequency_noise_lowers_cutoff_or_skips_at_low_sampling_rates():
    """At 100 Hz sampling the cutoff drops to 40 Hz (80 % of Nyquist) and says so; at 40 Hz
    less than 5 Hz of band is left and the check is skipped, saying why.
    Source: common practice, no source."""
    rng = np.random.default_rng(2)
    for sfreq_hz, words in ((100.0, "above 40 Hz instead of 50 Hz"), (40.0, "not checked")):
        data = _pink(8, int(30 * sfreq_hz), rng) * 10 * UV
        spectrum = welch_spectrum(data, sfreq_hz=sfreq_hz, window_s=2.0)
        outcome = check_high_frequency(spectrum, sfreq_hz=sfreq_hz, reference=_reference(8),
                                 power_line_hz=50.0)
        assert words in outcome.note
    assert np.isnan(outcome.values).all()


def test_correlation_flags_an_unrelated_channel():
    """A channel replaced by independent noise has its best match with the others below
    0.4 in most windows (PREP's criterion, on band-limited data); the others in none.
    Source: common practice, no source."""
    data = _eeg()
    data[11] = 10 * UV * _pink(1, data.shape[1], np.random.default_rng(3))[0]
    band = lowpass(highpass(data, sfreq_hz=SFREQ_HZ, l_freq_hz=1.0), sfreq_hz=SFREQ_HZ,
                   h_freq_hz=45.0)
    outcome = check_correlation(band, sfreq_hz=SFREQ_HZ, reference=_reference(16),
                                window_s=2.0, bad_window_share=0.5)
    assert outcome.values[11] > 0.9
    assert np.flatnonzero(outcome.flagged).tolist() == [11]


def test_correlation_skips_windows_without_signal():
    """Windows in which a channel has no signal are left to the dropout check.
    Source: common practice, no source."""
    data = _eeg()
    data[2, : data.shape[1] // 2] = 0.0
    mask = no_signal_mask(data, sfreq_hz=SFREQ_HZ, flat_step_v=0.01 * UV, min_run_s=0.1)
    band = lowpass(highpass(data, sfreq_hz=SFREQ_HZ, l_freq_hz=1.0), sfreq_hz=SFREQ_HZ,
                   h_freq_hz=45.0)
    outcome = check_correlation(band, sfreq_hz=SFREQ_HZ, reference=_reference(16),
                                window_s=2.0, no_signal=mask)
    assert outcome.values[2] == 0.0


def test_jumps_flag_a_popping_channel_but_not_shared_steps():
    """Five 150 uV steps on one channel are jumps; a step made by every channel at once is
    a common event; one lone step is below the minimum count. The pop at 12 s falls on a
    moment when 13 of the other 15 channels step by over 4 robust SDs of their own steps
    (this signal is mostly common to all channels), so it is taken for a common event: four
    of five count. Source: common practice, no source."""
    data = _eeg()
    for onset in (500, 1500, 3000, 4500, 6000):
        data[5, onset:] += 150 * UV
    data[:, 2500:] += 200 * UV
    data[8, 7000:] += 150 * UV
    outcome = check_jumps(data, sfreq_hz=SFREQ_HZ, reference=_reference(16))
    assert outcome.values[5] == pytest.approx(4 / 0.5, rel=1e-3)
    assert np.flatnonzero(outcome.flagged).tolist() == [5]


EPOCH_S = 3.0


@pytest.fixture(scope="module")
def joined_epochs():
    """30 epochs of 3 s cut from 270 s of the 32-channel demo site (demo signal model, no
    faults) and joined in a shuffled order: every channel breaks at every 3 s boundary, by
    an amount that clears the per-channel jump threshold on a few channels only (as in
    recordings exported as joined epochs)."""
    site = SITES[1]
    person = draw_person(participant_id="sub-joined", rng=np.random.default_rng(5))
    n_epochs = 30
    source, _, _ = simulate_recording(
        ch_names=site.ch_names, sfreq_hz=site.sfreq_hz,
        n_times=int(3 * n_epochs * EPOCH_S * site.sfreq_hz), condition="rest", person=person,
        site=site, channel_fault_kinds=(), with_bad_segments=False,
        signal_rng=np.random.default_rng(6), fault_rng=np.random.default_rng(7),
    )
    n_times = int(EPOCH_S * site.sfreq_hz)
    starts = np.random.default_rng(1).choice(
        np.arange(0, source.shape[1] - n_times, n_times), n_epochs, replace=False)
    data = np.concatenate([source[:, start:start + n_times] for start in starts], axis=1)
    return list(site.ch_names), site.sfreq_hz, data


def test_jumps_shared_by_most_channels_count_against_none(joined_epochs):
    """Breaks that every channel makes at once are found at the epoch boundaries and flag
    no channel, though each clears the jump threshold on some channels (the old rule, which
    asked the other channels to clear it too, flagged eight of them); a channel's own five
    pops between the boundaries still flag it. Source: common practice, no source."""
    ch_names, sfreq_hz, data = joined_epochs
    reference = _reference(len(ch_names))
    found = find_jumps(data, sfreq_hz=sfreq_hz, reference=reference)
    assert len(found.shared_onsets_s) >= 10
    offsets_s = np.mod(found.shared_onsets_s + EPOCH_S / 2, EPOCH_S) - EPOCH_S / 2
    assert np.abs(offsets_s).max() <= 1 / sfreq_hz
    assert not check_jumps(data, sfreq_hz=sfreq_hz, reference=reference).flagged.any()

    popping = data.copy()
    minutes = data.shape[1] / sfreq_hz / 60
    for onset_s in (10.4, 25.7, 40.2, 61.1, 77.9):
        popping[7, int(onset_s * sfreq_hz):] += 150 * UV
    outcome = check_jumps(popping, sfreq_hz=sfreq_hz, reference=reference)
    assert np.flatnonzero(outcome.flagged).tolist() == [7]
    assert outcome.values[7] == pytest.approx(5 / minutes, rel=1e-3)


def test_a_blink_ramp_is_not_a_jump():
    """At 128 Hz a 300 uV blink edge rising over five samples makes steps far above the
    jump threshold, but no single one stands out from its neighbours: no jump. The same
    300 uV made in one sample is a jump. Source: common practice, no source."""
    sfreq_hz = 128.0
    rng = np.random.default_rng(3)
    data = 10 * UV * np.cumsum(rng.standard_normal((8, int(60 * sfreq_hz))), axis=1) / 8
    ramp = data.copy()
    step = data.copy()
    for onset in range(600, 7000, 800):
        ramp[0, onset:onset + 5] += 300 * UV * np.arange(1, 6) / 5
        ramp[0, onset + 5:] += 300 * UV
        step[0, onset:] += 300 * UV
    reference = _reference(8)
    assert not check_jumps(ramp, sfreq_hz=sfreq_hz, reference=reference).flagged.any()
    assert np.flatnonzero(check_jumps(step, sfreq_hz=sfreq_hz, reference=reference)
                          .flagged).tolist() == [0]


def test_run_qc_rejects_time_around_shared_jumps(joined_epochs):
    """The whole check on the joined epochs: no channel bad, and each shared break becomes
    a rejected segment of 0.25 s on each side with a reason in words; the verdict is not
    "fail". Source: common practice, no source."""
    ch_names, sfreq_hz, data = joined_epochs
    result = run_qc_array(data, sfreq_hz=sfreq_hz, ch_names=ch_names, power_line_hz=50.0)
    assert result.bad_channels == []
    jumps = [s for s in result.segments if any("sudden jump" in r for r in s.reasons)]
    assert len(jumps) >= 10
    for segment in jumps:
        centre_s = segment.onset_s + segment.duration_s / 2
        assert segment.duration_s == pytest.approx(0.5, abs=1e-9)
        assert abs(centre_s - EPOCH_S * round(centre_s / EPOCH_S)) <= 1 / sfreq_hz
        assert segment.reasons == [
            "sudden jump on many channels at once (a break in the recording or a reset)"]
    assert result.verdict != "fail"


def test_mains_flags_one_humming_channel_and_huge_hum_everywhere():
    """A channel whose 50 Hz hum stands 12 dB or more above the median channel's is
    flagged; equal moderate hum on all channels is not; hum 40 dB above the flanks is
    flagged on every channel. Source: common practice, no source."""
    data = _eeg()
    times_s = np.arange(data.shape[1]) / SFREQ_HZ
    hum = np.sin(2 * np.pi * 50.0 * times_s)
    moderate = data + 0.5 * UV * hum
    moderate[7] += 20 * UV * hum
    outcome = check_mains(_spectrum(moderate), sfreq_hz=SFREQ_HZ, power_line_hz=50.0,
                          reference=_reference(16))
    assert np.flatnonzero(outcome.flagged).tolist() == [7]
    huge = data + 300 * UV * hum
    outcome = check_mains(_spectrum(huge), sfreq_hz=SFREQ_HZ, power_line_hz=50.0,
                          reference=_reference(16))
    assert outcome.threshold == 40.0
    assert outcome.flagged.all()


def test_mains_finds_60_hz_and_its_harmonic():
    """Hum at 120 Hz (the second harmonic of 60 Hz mains) is found on its channel; without
    a mains frequency the check is skipped with a note. Source: common practice, no source."""
    data = _eeg()
    times_s = np.arange(data.shape[1]) / SFREQ_HZ
    data[2] += 10 * UV * np.sin(2 * np.pi * 120.0 * times_s)
    outcome = check_mains(_spectrum(data), sfreq_hz=SFREQ_HZ, power_line_hz=60.0,
                          reference=_reference(16))
    assert np.flatnonzero(outcome.flagged).tolist() == [2]
    skipped = check_mains(_spectrum(data), sfreq_hz=SFREQ_HZ, power_line_hz=None,
                          reference=_reference(16))
    assert "not checked" in skipped.note
    assert not skipped.flagged.any()


def test_bridging_flags_near_identical_neighbours_only():
    """C3 and its neighbour Cz carry the same signal (plus 0.1 uV): both are flagged, each
    naming the other. Fp1 and O2 carry another shared signal but are not neighbours, so
    they are not compared. Source: common practice, no source."""
    data = _eeg()
    rng = np.random.default_rng(4)
    c3, cz, fp1, o2 = (NAMES_16.index(name) for name in ("C3", "Cz", "Fp1", "O2"))
    data[cz] = data[c3] + 0.1 * UV * rng.standard_normal(data.shape[1])
    data[o2] = data[fp1] + 0.1 * UV * rng.standard_normal(data.shape[1])
    pairs = nearest_neighbours(resolve_positions(NAMES_16), n_neighbours=4)
    outcome = check_bridging(data, sfreq_hz=SFREQ_HZ, pairs=pairs, window_s=2.0,
                             ch_names=NAMES_16)
    assert np.flatnonzero(outcome.flagged).tolist() == sorted([c3, cz])
    assert outcome.words(c3) == "nearly identical to Cz"
    assert outcome.words(cz) == "nearly identical to C3"


def test_spline_matrix_matches_mne():
    """Source: mne 1.13 ``mne.channels.interpolation._make_interpolation_matrix`` (a
    private function; spherical splines of stiffness 4, 50 Legendre terms, regularisation
    1e-5) on the same unit vectors: equal to 1e-10."""
    from mne.channels.interpolation import _make_interpolation_matrix

    unit = on_unit_sphere(resolve_positions(NAMES_16))
    ours = spline_interpolation_matrix(unit[:10], unit[10:])
    theirs = _make_interpolation_matrix(unit[:10], unit[10:])
    np.testing.assert_allclose(ours, theirs, atol=1e-10)


@pytest.fixture(scope="module")
def cap_recording():
    """30 s of the 32-channel demo site (demo signal model, no faults, no mains)."""
    site = dataclasses.replace(SITES[1], mains_uv=0.0)
    person = draw_person(participant_id="sub-unit", rng=np.random.default_rng(5))
    data_v, _, _ = simulate_recording(
        ch_names=site.ch_names, sfreq_hz=site.sfreq_hz, n_times=int(30 * site.sfreq_hz),
        condition="rest", person=person, site=site, channel_fault_kinds=(),
        with_bad_segments=False, signal_rng=np.random.default_rng(6),
        fault_rng=np.random.default_rng(7),
    )
    return list(site.ch_names), site.sfreq_hz, data_v


def test_predictability_finds_a_misplaced_electrode(cap_recording):
    """Fp1 carrying O2's signal still follows other channels (the correlation check passes
    it) but cannot be predicted from the electrodes around its position; the same
    random_state gives the same values. Source: common practice, no source."""
    names, sfreq_hz, data = cap_recording
    data = data.copy()
    data[names.index("Fp1")] = data[names.index("O2")]
    band = lowpass(highpass(data, sfreq_hz=sfreq_hz, l_freq_hz=1.0), sfreq_hz=sfreq_hz,
                   h_freq_hz=45.0)
    unit = on_unit_sphere(resolve_positions(names))
    predictors = np.ones(len(names), dtype=bool)
    predictors[names.index("Fp1")] = False
    first = check_predictability(band, sfreq_hz=sfreq_hz, unit_positions=unit,
                                 predictors=predictors, correlation_min=0.6, random_state=3)
    again = check_predictability(band, sfreq_hz=sfreq_hz, unit_positions=unit,
                                 predictors=predictors, correlation_min=0.6, random_state=3)
    np.testing.assert_array_equal(first.values, again.values)
    assert [names[i] for i in np.flatnonzero(first.flagged)] == ["Fp1"]
    correlation = check_correlation(band, sfreq_hz=sfreq_hz,
                                    reference=np.ones(len(names), dtype=bool), window_s=2.0,
                                    bad_window_share=0.5)
    assert not correlation.flagged[names.index("Fp1")]


def test_given_positions_in_any_frame(cap_recording):
    """Positions passed in (as from electrodes.tsv) are used instead of the template, and
    only their shape matters: the template shifted by 2 cm and scaled by 1.1 gives the same
    predictability values as the template itself. Source: common practice, no source."""
    names, sfreq_hz, data = cap_recording
    data = data.copy()
    data[names.index("Fp1")] = data[names.index("O2")]
    shifted = {name: 1.1 * template_position(name) + np.array([0.02, -0.01, 0.02])
               for name in names}
    settings = QCSettings(check_predictability=True)
    template = run_qc_array(data, sfreq_hz=sfreq_hz, ch_names=names, settings=settings)
    given = run_qc_array(data, sfreq_hz=sfreq_hz, ch_names=names, settings=settings,
                         positions=shifted)
    assert given.flagged_by("predictability") == template.flagged_by("predictability")
    assert "Fp1" in given.flagged_by("predictability")
    for name in names:
        assert given.channels[name].metrics["predictability"] == pytest.approx(
            template.channels[name].metrics["predictability"])


def test_predictability_skipped_for_small_montages():
    """Sixteen channels give subsets of four, below the six required: skipped with a note.
    Source: common practice, no source."""
    data = _eeg()
    unit = on_unit_sphere(resolve_positions(NAMES_16))
    outcome = check_predictability(data, sfreq_hz=SFREQ_HZ, unit_positions=unit,
                                   predictors=_reference(16), min_subset=6)
    assert "not checked" in outcome.note
    assert np.isnan(outcome.values).all()


def test_template_positions_by_name():
    """Template lookups ignore case and know the classic names (T3/T4/T5/T6 are the sites
    of T7/T8/P7/P8); unknown names and NaN positions give NaN rows.
    Source: common practice, no source."""
    np.testing.assert_array_equal(template_position("fp1"), template_position("Fp1"))
    for classic, modern in (("T3", "T7"), ("T4", "T8"), ("T5", "P7"), ("T6", "P8")):
        np.testing.assert_allclose(template_position(classic), template_position(modern))
    points = resolve_positions(["Cz", "EOG left"])
    assert np.isfinite(points[0]).all() and np.isnan(points[1]).all()
    given = resolve_positions(["A", "B"], {"A": (0.1, 0.0, 0.0), "B": (np.nan, 0.0, 0.0)})
    assert given[0].tolist() == [0.1, 0.0, 0.0] and np.isnan(given[1]).all()


def _with_segments(data):
    data = data.copy()
    n = int(SFREQ_HZ)
    data[:, 5 * n : 7 * n] += 300 * UV * np.sin(np.linspace(0, 4 * np.pi, 2 * n))
    data[:, 12 * n : 14 * n] += 20 * UV * _hiss(2 * n, l_freq_hz=30.0,
                                                rng=np.random.default_rng(8))
    data[:, 20 * n : 22 * n] = 0.0
    data[3, 25 * n : 26 * n] += 500 * UV
    return data


def test_segments_found_across_channels():
    """Large amplitude (5-7 s), a muscle-band burst (12-14 s) and no signal (20-22 s) on
    every channel become segments with those reasons; a large artefact on one channel
    (25-26 s) does not. Source: common practice, no source."""
    data = _with_segments(_eeg())
    result = run_qc_array(data, sfreq_hz=SFREQ_HZ, ch_names=NAMES_16, power_line_hz=50.0)
    found = [(s.onset_s, s.duration_s, s.reasons) for s in result.segments]
    assert found == [
        (5.0, 2.0, ["very large amplitude"]),
        (12.0, 2.0, ["muscle activity"]),
        (20.0, 2.0, ["no signal on many channels"]),
    ]
    assert result.rejected_share == pytest.approx(6.0 / 30.0)


def _blinks(n_times, onsets_s, amplitude_uv):
    times_s = np.arange(n_times) / SFREQ_HZ
    trace = np.zeros(n_times)
    for onset_s in onsets_s:
        lag_s = times_s - onset_s
        trace += amplitude_uv * UV * np.exp(-0.5 * (lag_s / np.where(lag_s < 0, 0.05, 0.09)) ** 2)
    return trace


def test_blinks_counted_on_frontal_channels():
    """Twelve 100 uV blinks on Fp1 and Fp2 in 30 s: twelve found, 24 per minute; without a
    frontal channel nothing is counted. Source: common practice, no source."""
    data = _eeg()
    onsets_s = np.arange(1.0, 30.0, 2.4)[:12]
    blink = _blinks(data.shape[1], onsets_s, 100.0)
    data[0] += blink
    data[1] += 0.9 * blink
    drift_free = highpass(data, sfreq_hz=SFREQ_HZ, l_freq_hz=1.0)
    blinks = count_blinks(drift_free, sfreq_hz=SFREQ_HZ, ch_names=NAMES_16,
                          usable=_reference(16))
    assert blinks.count == 12
    assert blinks.per_minute == pytest.approx(24.0)
    assert blinks.channels == ["Fp1", "Fp2"]
    without = count_blinks(drift_free[2:], sfreq_hz=SFREQ_HZ, ch_names=NAMES_16[2:],
                           usable=_reference(14))
    assert without.count == 0 and without.per_minute is None


def test_site_marked_channel_is_bad_and_outside_the_reference():
    """A channel the site marked bad is bad with "marked by site" first, keeps the site's
    description, and does not move the others' statistics: their values equal those of a
    run without that channel. Source: common practice, no source."""
    data = _eeg()
    data[4] *= 3.0
    marked = run_qc_array(data, sfreq_hz=SFREQ_HZ, ch_names=NAMES_16,
                          marked_by_site={"F4": "loose electrode"})
    channel = marked.channels["F4"]
    assert channel.status == "bad" and channel.marked_by_site
    assert channel.reasons[0].words == "marked by site"
    assert channel.site_description == "loose electrode"
    keep = [name for name in NAMES_16 if name != "F4"]
    alone = run_qc_array(np.delete(data, 4, axis=0), sfreq_hz=SFREQ_HZ, ch_names=keep)
    for name in keep:
        for check in ("deviation", "high_frequency", "correlation", "mains"):
            assert marked.channels[name].metrics[check] == pytest.approx(
                alone.channels[name].metrics[check], nan_ok=True), (name, check)


def test_run_qc_reads_raw_status_and_ignores_other_types():
    """run_qc takes channels.tsv status, also honours info["bads"], and leaves non-EEG
    channels out. Source: common practice, no source."""
    data = _eeg(n_channels=17)
    info = mne.create_info(NAMES_16 + ["ECG"], SFREQ_HZ, ch_types=["eeg"] * 16 + ["ecg"])
    raw = mne.io.RawArray(data, info, verbose="ERROR")
    raw.info["bads"] = ["O1"]
    result = run_qc(raw, power_line_hz=50.0,
                    site_status={"Pz": ("bad", "n/a"), "Cz": ("good", "n/a")})
    assert "ECG" not in result.channels
    assert result.channels["Pz"].marked_by_site and result.channels["O1"].marked_by_site
    assert result.channels["Pz"].site_description is None
    assert not result.channels["Cz"].marked_by_site


@pytest.mark.parametrize("n_channels", [16, 32])
def test_white_noise_is_never_a_silent_pass(n_channels):
    """Independent white noise on every channel (no shared signal) must not crash and must
    give review or fail with a reason in words. Source: common practice, no source."""
    rng = np.random.default_rng(n_channels)
    names = list(NAMES_16) if n_channels == 16 else list(SITES[1].ch_names)
    data = 10 * UV * rng.standard_normal((n_channels, int(120 * SFREQ_HZ)))
    result = run_qc_array(data, sfreq_hz=SFREQ_HZ, ch_names=names, power_line_hz=50.0)
    assert result.verdict in ("review", "fail")
    assert any("do not follow each other" in words for words in result.verdict_reasons)
    assert len(result.bad_channels) == n_channels


def test_degenerate_recordings_do_not_crash():
    """One channel, all channels flat, and a recording shorter than one window all give a
    verdict with reasons. Source: common practice, no source."""
    rng = np.random.default_rng(9)
    single = run_qc_array(10 * UV * rng.standard_normal((1, 2500)), sfreq_hz=SFREQ_HZ,
                          ch_names=["Cz"])
    assert single.verdict in ("pass", "review", "fail") and single.verdict_reasons
    flat = run_qc_array(np.zeros((4, 2500)), sfreq_hz=SFREQ_HZ, ch_names=NAMES_16[:4])
    assert flat.verdict == "fail"
    assert "no channel carries a signal" in flat.verdict_reasons
    short = run_qc_array(_eeg(seconds=0.5), sfreq_hz=SFREQ_HZ, ch_names=NAMES_16)
    assert short.verdict == "review"
    assert any("shorter than the protocol's minimum" in w for w in short.verdict_reasons)


def test_settings_digest_stable_and_sensitive():
    """Equal settings give equal digests (whatever the number types); changing one
    threshold changes the digest; as_dict round-trips. Source: common practice, no source."""
    defaults = QCSettings()
    assert defaults.digest() == QCSettings().digest()
    assert QCSettings(min_duration_s=60).digest() == defaults.digest()
    assert QCSettings(**defaults.as_dict()) == defaults
    assert QCSettings(deviation_z_max=4.0).digest() != defaults.digest()
    assert QCSettings(bad_channel_share_review=0.12).digest() != defaults.digest()
    assert len(defaults.digest()) == 64
    assert defaults.as_dict()["bad_channel_share_fail"] == 0.25


@pytest.mark.parametrize(
    ("changes", "words"),
    [
        ({"bad_channel_share_review": 0.5},
         "bad_channel_share_review: give a review threshold not above bad_channel_share_fail"),
        ({"correlation_min": -1}, "correlation_min: give a number of at least 0"),
        ({"segment_channel_share": 2.0}, "segment_channel_share: give a number from 0 to 1"),
        ({"predict_n_subsets": 2.5}, "predict_n_subsets: give a whole number"),
        ({"check_predictability": "yes"}, "check_predictability: give true or false"),
        ({"hf_z_max": "5"}, "hf_z_max: give a number"),
        ({"lowpass_hz": 0.5}, "lowpass_hz: give a value above highpass_hz"),
    ],
)
def test_settings_reject_bad_values(changes, words):
    """Each bad value is refused naming the setting. Source: common practice, no source."""
    with pytest.raises(ValueError, match=words):
        QCSettings(**changes)


def test_settings_reject_unknown_names():
    """A name QCSettings does not know is refused. Source: common practice, no source."""
    with pytest.raises(TypeError):
        QCSettings(zscore=3.0)


def test_result_as_dict_is_json_ready():
    """as_dict() holds only JSON types (NaN becomes null), with rounded values.
    Source: common practice, no source."""
    data = _with_segments(_eeg())
    data[0] = 0.0
    result = run_qc_array(data, sfreq_hz=SFREQ_HZ, ch_names=NAMES_16, power_line_hz=50.0)
    out = result.as_dict()
    text = json.dumps(out, allow_nan=False)
    assert json.loads(text)["code_version"] == CODE_VERSION
    assert out["settings_digest"] == QCSettings().digest()
    assert out["channels"]["Fp1"]["metrics"]["correlation"] is None
    assert out["channels"]["Fp1"]["reasons"][0]["words"] == "no signal"
    assert set(out["psd"]["channels"]) == set(NAMES_16)
    deviation = out["channels"]["Fz"]["metrics"]["deviation"]
    assert deviation == float(f"{deviation:.4g}")


def test_verdict_after_decisions_uses_the_checks_rule():
    """A stored result (as_dict, JSON round trip) decided again without any decision gives
    the checks' own verdict and reasons; setting its bad channels good gives the verdict of
    a recording without them, and a good channel set bad counts with its words. The
    result is not changed. Source: common practice, no source."""
    data = _eeg(seconds=90.0)
    data[3] = 0.0
    data[11] *= 8.0
    result = run_qc_array(data, sfreq_hz=SFREQ_HZ, ch_names=NAMES_16, power_line_hz=50.0)
    assert result.bad_channels == ["Fz", "P3"] and result.verdict == "review"
    stored = json.loads(json.dumps(result.as_dict(include_psd=False)))
    frozen = json.dumps(stored, sort_keys=True)
    settings = QCSettings()
    same = effective_verdict(stored, {}, settings=settings)
    assert (same["verdict"], same["verdict_reasons"]) == (result.verdict,
                                                          result.verdict_reasons)
    assert same["n_bad_channels"] == 2 and same["n_channels"] == 16
    cleared = effective_verdict(stored, {"Fz": "good", "P3": "good"}, settings=settings)
    assert cleared["verdict"] == "pass" and cleared["bad_channels"] == []
    assert cleared["verdict_reasons"] == [
        "0 of 16 channels bad and 0% of the time rejected: within the protocol's limits"]
    more = effective_verdict(stored, {"Fz": "good", "Cz": "bad", "O1": "bad"},
                             settings=settings)
    assert more["bad_channels"] == ["Cz", "P3", "O1"] and more["verdict"] == "review"
    assert "set bad by a person (2)" in more["verdict_reasons"][0]
    assert json.dumps(stored, sort_keys=True) == frozen
    del stored["verdict_inputs"]
    legacy = effective_verdict(stored, {}, settings=settings)
    assert (legacy["verdict"], legacy["verdict_reasons"]) == (result.verdict,
                                                              result.verdict_reasons)


def test_verdict_rules():
    """Protocol thresholds: review from 10 % bad channels or 15 % rejected time or a short
    recording; fail from 25 % or 40 % or a sampling rate below 100 Hz; pass otherwise, each
    with its reason in words. Source: common practice, no source."""
    settings = QCSettings()
    common = dict(settings=settings, duration_s=300.0, n_channels=20, n_with_signal=20)

    def verdict(**changes):
        arguments = {"sfreq_hz": 250.0, "bad_reasons": {}, "rejected_share": 0.0,
                     **common, **changes}
        return decide_verdict(**arguments)

    assert verdict()[0] == "pass"
    assert "within the protocol's limits" in verdict()[1][0]
    two_bad = {"Fz": ["no signal"], "Cz": ["strong mains hum"]}
    level, reasons = verdict(bad_reasons=two_bad)
    assert level == "review" and reasons[0].startswith("2 of 20 channels are bad (10%")
    five_bad = {name: ["no signal"] for name in "ABCDE"}
    assert verdict(bad_reasons=five_bad)[0] == "fail"
    assert verdict(rejected_share=0.2)[0] == "review"
    assert verdict(rejected_share=0.4)[0] == "fail"
    assert verdict(duration_s=30.0)[0] == "review"
    level, reasons = verdict(sfreq_hz=64.0)
    assert level == "fail" and "below the protocol's minimum of 100 Hz" in reasons[0]
