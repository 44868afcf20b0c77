"""Signal preparation and windowing against references outside Cairn: MNE's own filters,
interpolation and re-reference, scipy's resampling and filter responses, closed forms, and
pyedflib's shipped test recording."""

import json
import os

import mne
import numpy as np
import pytest
from scipy import signal

from cairn_science.signal import (
    ChannelError,
    PrepSettings,
    cut_windows,
    plan_windows,
    prepare,
)

pytestmark = pytest.mark.filterwarnings("ignore::FutureWarning")

# 19 channels of the 10-20 system, all in MNE's 10-20 template.
TEN_TWENTY = ["Fp1", "Fp2", "F7", "F3", "Fz", "F4", "F8", "T7", "C3", "Cz", "C4", "T8",
              "P7", "P3", "Pz", "P4", "P8", "O1", "O2"]
AS_RECORDED = PrepSettings(notch=False, reference="as_recorded")


def _sine(freq_hz, *, sfreq_hz, duration_s, amplitude_v=1e-5, phase=0.3):
    t = np.arange(int(round(duration_s * sfreq_hz))) / sfreq_hz
    return amplitude_v * np.sin(2 * np.pi * freq_hz * t + phase)


def _amplitude(x, freq_hz, *, sfreq_hz, edge):
    """Least-squares amplitude of the sinusoid at ``freq_hz`` in ``x[edge:-edge]``."""
    t = np.arange(x.shape[-1])[edge:-edge] / sfreq_hz
    design = np.column_stack([np.sin(2 * np.pi * freq_hz * t), np.cos(2 * np.pi * freq_hz * t)])
    coefficients, *_ = np.linalg.lstsq(design, x[edge:-edge], rcond=None)
    return float(np.hypot(*coefficients))


def _noise(n_channels, n_times, *, seed=0):
    return 1e-5 * np.random.default_rng(seed).standard_normal((n_channels, n_times))


def _step(prepared, name):
    return next(step for step in prepared.steps if step["step"] == name)


def _mne_raw(data, ch_names, sfreq_hz):
    info = mne.create_info(list(ch_names), sfreq_hz, ch_types="eeg")
    return mne.io.RawArray(data, info, verbose=False)


# Band-pass ----------------------------------------------------------------------------------


@pytest.mark.parametrize("sfreq_hz", [200.0, 250.0])
def test_bandpass_stops_50_hz_and_passes_10_hz(sfreq_hz):
    """0.5-40 Hz: a 50 Hz sine loses at least 40 dB and a 10 Hz sine stays within 0.1 dB,
    and both gains equal the response of the filter MNE designs for these parameters.

    Reference: the design target (MNE's default firwin/hamming FIR has about 53 dB stopband
    attenuation, from memory; 40 dB leaves room for the stopband edge at exactly 50 Hz) and
    scipy.signal.freqz of mne.filter.create_filter(None, sfreq, 0.5, 40). Away from the
    edges (half a filter length) the zero-phase FIR's output of a sinusoid is exactly
    |H(f)| times it, so the measured gain must match freqz within 0.01 dB (float rounding)."""
    x = np.vstack([_sine(10.0, sfreq_hz=sfreq_hz, duration_s=30.0),
                   _sine(50.0, sfreq_hz=sfreq_hz, duration_s=30.0)])
    out = prepare(x, sfreq_hz=sfreq_hz, ch_names=["Cz", "Pz"], power_line_hz=None,
                  bad_channels=[], settings=AS_RECORDED)
    taps = mne.filter.create_filter(None, sfreq_hz, 0.5, 40.0, verbose=False)
    edge = len(taps) // 2 + 1
    gains_db = [20 * np.log10(_amplitude(out.data_v[row], freq, sfreq_hz=sfreq_hz, edge=edge)
                              / _amplitude(x[row], freq, sfreq_hz=sfreq_hz, edge=edge))
                for row, freq in [(0, 10.0), (1, 50.0)]]
    _, response = signal.freqz(taps, worN=[10.0, 50.0], fs=sfreq_hz)
    assert abs(gains_db[0]) <= 0.1
    assert gains_db[1] <= -40.0
    np.testing.assert_allclose(gains_db, 20 * np.log10(np.abs(response)), atol=0.01)


def test_bandpass_is_mne_default_filter():
    """The band-pass equals mne.filter.filter_data with its default transition bands and
    filter length. Reference: mne.filter.filter_data. Tolerance: rtol 1e-10, the same
    computation up to float rounding."""
    x = _noise(3, 2500)
    out = prepare(x, sfreq_hz=250.0, ch_names=["Fz", "Cz", "Pz"], power_line_hz=None,
                  bad_channels=[], settings=AS_RECORDED)
    expected = mne.filter.filter_data(x, 250.0, 0.5, 40.0, verbose=False)
    np.testing.assert_allclose(out.data_v, expected, rtol=1e-10, atol=1e-20)


def test_recording_shorter_than_filter_is_refused():
    """A 5 s recording at 250 Hz is shorter than the 0.5 Hz high-pass FIR, whose length
    (MNE docs: 3.3 / shortest transition band for firwin with hamming, made odd:
    3.3 / 0.5 Hz * 250 Hz = 1650 -> 1651 samples) the error names with the recording's.
    Reference: mne.filter.filter_data's filter_length='auto' documentation, closed form."""
    x = _noise(2, 1250)
    with pytest.raises(ValueError, match=r"1250 samples.*1651 samples") as caught:
        prepare(x, sfreq_hz=250.0, ch_names=["Cz", "Pz"], power_line_hz=None,
                bad_channels=[], settings=AS_RECORDED)
    assert "l_freq_hz" in str(caught.value)


def test_h_freq_at_nyquist_is_refused():
    """A low-pass edge at the Nyquist frequency cannot be designed; the error names
    h_freq_hz. Closed form (Nyquist = sfreq / 2)."""
    with pytest.raises(ValueError, match="h_freq_hz"):
        prepare(_noise(2, 5000), sfreq_hz=80.0, ch_names=["Cz", "Pz"], power_line_hz=None,
                bad_channels=[], settings=AS_RECORDED)


# Notch --------------------------------------------------------------------------------------


def _hum_recording():
    sfreq_hz = 250.0
    tone = _sine(10.0, sfreq_hz=sfreq_hz, duration_s=30.0)
    hum = _sine(60.0, sfreq_hz=sfreq_hz, duration_s=30.0, amplitude_v=2e-5, phase=1.1)
    return sfreq_hz, tone, hum


def test_notch_removes_60_hz_hum():
    """60 Hz hum on a 10 Hz sine at 250 Hz with 60 Hz mains: at least 30 dB less at 60 Hz,
    the 10 Hz part within 0.1 dB. The low-pass is set to 100 Hz so that only the notch acts
    on 60 Hz. Reference: MNE's notch design target (zero-phase FIR band-stop of width
    f / 200 plus 1 Hz transition; its stopband is far deeper than 30 dB, from memory);
    amplitudes by least squares away from the edges (half the 3301-sample notch filter)."""
    sfreq_hz, tone, hum = _hum_recording()
    x = (tone + hum)[None]
    settings = PrepSettings(h_freq_hz=100.0, reference="as_recorded")
    out = prepare(x, sfreq_hz=sfreq_hz, ch_names=["Cz"], power_line_hz=60.0,
                  bad_channels=[], settings=settings)
    edge = 1700
    hum_db = 20 * np.log10(_amplitude(out.data_v[0], 60.0, sfreq_hz=sfreq_hz, edge=edge)
                           / _amplitude(x[0], 60.0, sfreq_hz=sfreq_hz, edge=edge))
    tone_db = 20 * np.log10(_amplitude(out.data_v[0], 10.0, sfreq_hz=sfreq_hz, edge=edge)
                            / _amplitude(tone, 10.0, sfreq_hz=sfreq_hz, edge=edge))
    assert hum_db <= -30.0
    assert abs(tone_db) <= 0.1
    assert _step(out, "notch")["freqs_hz"] == [60.0, 120.0]


def test_notch_equals_mne_notch_filter():
    """Notch then band-pass equal mne.filter.notch_filter at 60 and 120 Hz (harmonics below
    the 100 + 25 Hz stopband edge) followed by mne.filter.filter_data. Reference: mne.
    Tolerance: rtol 1e-10, the same computation up to float rounding."""
    sfreq_hz, tone, hum = _hum_recording()
    x = np.vstack([tone + hum, hum])
    settings = PrepSettings(h_freq_hz=100.0, reference="as_recorded")
    out = prepare(x, sfreq_hz=sfreq_hz, ch_names=["Cz", "Pz"], power_line_hz=60.0,
                  bad_channels=[], settings=settings)
    expected = mne.filter.filter_data(
        mne.filter.notch_filter(x, sfreq_hz, [60.0, 120.0], verbose=False),
        sfreq_hz, 0.5, 100.0, verbose=False)
    np.testing.assert_allclose(out.data_v, expected, rtol=1e-10, atol=1e-20)


@pytest.mark.parametrize("power_line_hz, reason", [
    (50.0, "stopband"), (60.0, "stopband"), (None, "unknown")])
def test_notch_skipped_and_said_why(power_line_hz, reason):
    """With the 40 Hz low-pass (stopband from 40 + 10 = 50 Hz, MNE's default transition of
    h / 4) the low-pass already removes 50 and 60 Hz mains; without a mains frequency
    nothing is notched. The output is the band-pass alone. Reference: mne.filter.filter_data
    (rtol 1e-10, float rounding)."""
    x = _noise(2, 2500)
    out = prepare(x, sfreq_hz=250.0, ch_names=["Cz", "Pz"], power_line_hz=power_line_hz,
                  bad_channels=[], settings=PrepSettings(reference="as_recorded"))
    notch = _step(out, "notch")
    assert notch["applied"] is False
    assert reason in notch["reason"]
    np.testing.assert_allclose(out.data_v, mne.filter.filter_data(x, 250.0, 0.5, 40.0,
                                                                  verbose=False),
                               rtol=1e-10, atol=1e-20)


# Resample -----------------------------------------------------------------------------------


@pytest.mark.parametrize("from_hz, to_hz, up, down", [
    (250.0, 125.0, 1, 2), (256.0, 200.0, 25, 32), (200.0, 500.0, 5, 2)])
def test_resample_equals_resample_poly(from_hz, to_hz, up, down):
    """Resampling after the band-pass equals scipy.signal.resample_poly with the reduced
    rate ratio and scipy's default Kaiser window. Reference: scipy.signal.resample_poly on
    mne.filter.filter_data output. Tolerance: rtol 1e-10, float rounding."""
    n_times = int(from_hz * 12)
    x = _noise(2, n_times)
    out = prepare(x, sfreq_hz=from_hz, ch_names=["Cz", "Pz"], power_line_hz=None,
                  bad_channels=[],
                  settings=PrepSettings(notch=False, reference="as_recorded",
                                        analysis_sfreq_hz=to_hz))
    filtered = mne.filter.filter_data(x, from_hz, 0.5, 40.0, verbose=False)
    expected = signal.resample_poly(filtered, up, down, axis=-1)
    assert out.sfreq_hz == to_hz
    assert out.data_v.shape == (2, int(np.ceil(n_times * up / down)))
    np.testing.assert_allclose(out.data_v, expected, rtol=1e-10, atol=1e-20)
    step = _step(out, "resample")
    assert (step["method"], step["up"], step["down"]) == ("polyphase", up, down)


def test_resample_without_simple_ratio_uses_mne_fft_resampling():
    """A rate ratio without small terms (256.123 Hz to 250 Hz) is resampled by MNE's FFT
    method. Reference: mne.filter.resample(method='fft') on mne.filter.filter_data output.
    Tolerance: rtol 1e-10, float rounding."""
    x = _noise(2, 3000)
    out = prepare(x, sfreq_hz=256.123, ch_names=["Cz", "Pz"], power_line_hz=None,
                  bad_channels=[],
                  settings=PrepSettings(notch=False, reference="as_recorded",
                                        analysis_sfreq_hz=250.0))
    expected = mne.filter.resample(
        mne.filter.filter_data(x, 256.123, 0.5, 40.0, verbose=False), up=250.0, down=256.123,
        method="fft", verbose=False)
    np.testing.assert_allclose(out.data_v, expected, rtol=1e-10, atol=1e-20)
    assert _step(out, "resample")["method"] == "fft"


def test_resample_refuses_rate_that_aliases_the_passband():
    """80 Hz is below 2 x (40 + 10) = 100 Hz, twice the band-pass stopband edge; the error
    names analysis_sfreq_hz and the least rate. Closed form (Nyquist criterion)."""
    with pytest.raises(ValueError, match=r"analysis_sfreq_hz.*100 Hz"):
        prepare(_noise(2, 2500), sfreq_hz=250.0, ch_names=["Cz", "Pz"], power_line_hz=None,
                bad_channels=[],
                settings=PrepSettings(notch=False, analysis_sfreq_hz=80.0))


# Bad channels -------------------------------------------------------------------------------


def _template():
    """MNE's 10-20 template: "standard_1020", renamed "colin27_1020" in mne 1.13 (same names
    and positions)."""
    available = mne.channels.get_builtin_montages()
    name = "colin27_1020" if "colin27_1020" in available else "standard_1020"
    return mne.channels.make_standard_montage(name)


def _template_origin():
    """MNE's sphere fit to every electrode of the template (head frame, m)."""
    montage = _template()
    info = mne.create_info(montage.ch_names, 100.0, ch_types="eeg")
    info.set_montage(montage, verbose=False)
    return mne.bem.fit_sphere_to_headshape(info, units="m", verbose=False)[1]


@pytest.mark.parametrize("names, bads", [
    (TEN_TWENTY, ["C3", "O2"]),
    (["Fz", "C3", "Cz", "C4", "Pz", "Oz", "F3", "F4"], ["Cz"]),
])
def test_interpolation_equals_mne_interpolate_bads(names, bads):
    """Bad channels, interpolated by spherical splines, equal MNE's own Raw.interpolate_bads
    on the same band-passed data and the standard_1020 montage, with the head sphere MNE
    fits to the whole template (mne.bem.fit_sphere_to_headshape) as origin, also for a
    sparse 8-channel set. Reference: mne.io.Raw.interpolate_bads. Tolerance: rtol 1e-9 and
    atol 1e-15 V, float rounding against 1e-5 V signals (differences seen: ~1e-16 V)."""
    x = _noise(len(names), 2500, seed=3)
    out = prepare(x, sfreq_hz=250.0, ch_names=names, power_line_hz=None,
                  bad_channels=bads, settings=AS_RECORDED)
    raw = _mne_raw(mne.filter.filter_data(x, 250.0, 0.5, 40.0, verbose=False), names, 250.0)
    raw.set_montage(_template(), on_missing="ignore", verbose=False)
    raw.info["bads"] = list(bads)
    raw.interpolate_bads(reset_bads=True, origin=_template_origin(), verbose=False)
    np.testing.assert_allclose(out.data_v, raw.get_data(), rtol=1e-9, atol=1e-15)
    assert out.ch_names == names
    assert {name for name, status in out.channel_status.items() if status != "good"} == set(
        bads)
    assert all(out.channel_status[name] == "interpolated" for name in bads)
    assert _step(out, "bad_channels")["interpolated"] == bads


def test_bad_channel_without_position_is_dropped():
    """A bad channel the 10-20 template has no position for (X1) cannot be interpolated: it
    is dropped and the reason said; the others are untouched (band-pass only, MNE
    reference as above). Reference: mne.channels.make_standard_montage('standard_1020')
    (has no X1)."""
    names = TEN_TWENTY[:8] + ["X1"]
    assert "X1" not in _template().ch_names
    x = _noise(len(names), 2500, seed=4)
    out = prepare(x, sfreq_hz=250.0, ch_names=names, power_line_hz=None,
                  bad_channels=["X1"], settings=AS_RECORDED)
    assert out.ch_names == TEN_TWENTY[:8]
    assert out.channel_status["X1"] == "dropped"
    assert "position" in _step(out, "bad_channels")["reasons"]["X1"]
    np.testing.assert_allclose(
        out.data_v, mne.filter.filter_data(x[:8], 250.0, 0.5, 40.0, verbose=False),
        rtol=1e-10, atol=1e-20)


def test_too_few_good_channels_to_interpolate_drops_the_bad():
    """With only 2 good positioned channels left (fewer than 3) the bad ones are dropped,
    not interpolated. Common practice, no source (three points are the least that span a
    patch of the scalp)."""
    names = ["Fz", "Cz", "Pz", "Oz"]
    out = prepare(_noise(4, 2500), sfreq_hz=250.0, ch_names=names, power_line_hz=None,
                  bad_channels=["Pz", "Oz"], settings=AS_RECORDED)
    assert out.ch_names == ["Fz", "Cz"]
    assert out.channel_status == {"Fz": "good", "Cz": "good", "Pz": "dropped", "Oz": "dropped"}
    assert "fewer than the 3" in _step(out, "bad_channels")["reasons"]["Pz"]
    with pytest.raises(ChannelError, match="average"):
        prepare(_noise(4, 2500), sfreq_hz=250.0, ch_names=names, power_line_hz=None,
                bad_channels=["Cz", "Pz", "Oz"], settings=PrepSettings(notch=False))


def test_drop_mode_leaves_bad_channels_out():
    """bad_channels='drop' leaves the bad channels out and keeps the rest as band-passed.
    Reference: mne.filter.filter_data (rtol 1e-10, float rounding)."""
    x = _noise(4, 2500)
    out = prepare(x, sfreq_hz=250.0, ch_names=["Fz", "Cz", "Pz", "Oz"], power_line_hz=None,
                  bad_channels=["Cz"],
                  settings=PrepSettings(notch=False, reference="as_recorded",
                                        bad_channels="drop"))
    assert out.ch_names == ["Fz", "Pz", "Oz"]
    assert out.channel_status["Cz"] == "dropped"
    np.testing.assert_allclose(
        out.data_v, mne.filter.filter_data(x[[0, 2, 3]], 250.0, 0.5, 40.0, verbose=False),
        rtol=1e-10, atol=1e-20)


# Re-reference -------------------------------------------------------------------------------


def test_average_reference_equals_mne():
    """After the average reference each sample's channel mean is 0 (atol 1e-20 V: float
    rounding on 1e-5 V signals), and the data equal mne.set_eeg_reference(raw, 'average')
    on the same band-passed data (rtol 1e-10). Reference: mne.set_eeg_reference."""
    names = TEN_TWENTY[:6]
    x = _noise(len(names), 2500, seed=5) + 3e-5  # an offset the reference must remove
    out = prepare(x, sfreq_hz=250.0, ch_names=names, power_line_hz=None, bad_channels=[],
                  settings=PrepSettings(notch=False, reference="average"))
    np.testing.assert_allclose(out.data_v.mean(axis=0), 0.0, atol=1e-20)
    raw = _mne_raw(mne.filter.filter_data(x, 250.0, 0.5, 40.0, verbose=False), names, 250.0)
    referenced, _ = mne.set_eeg_reference(raw, "average", projection=False, verbose=False)
    np.testing.assert_allclose(out.data_v, referenced.get_data(), rtol=1e-10, atol=1e-20)
    assert _step(out, "reference")["channels"] == names


# Channel harmonisation ----------------------------------------------------------------------


def test_alias_and_case_matching():
    """Requested names match recorded ones ignoring case and the classic 10-20 aliases
    (T3=T7, T4=T8, T5=P7, T6=P8, common practice); the output is in the requested order and
    spelling, and the unrequested channel is left out and recorded. Reference:
    mne.filter.filter_data on the matching recorded rows (rtol 1e-10, float rounding)."""
    recorded = ["fp1", "T3", "t4", "T5", "T6", "Cz", "EOG"]
    requested = ("CZ", "T7", "T8", "P7", "P8", "FP1")
    x = _noise(len(recorded), 2500, seed=6)
    out = prepare(x, sfreq_hz=250.0, ch_names=recorded, power_line_hz=None,
                  bad_channels=[], settings=PrepSettings(notch=False, reference="as_recorded",
                                                         channels=requested))
    assert out.ch_names == list(requested)
    rows = [5, 1, 2, 3, 4, 0]
    np.testing.assert_allclose(
        out.data_v, mne.filter.filter_data(x[rows], 250.0, 0.5, 40.0, verbose=False),
        rtol=1e-10, atol=1e-20)
    pick = _step(out, "pick_channels")
    assert pick["left_out"] == ["EOG"]
    assert pick["recorded_as"]["T7"] == "T3"
    assert out.channel_status == {name: "good" for name in requested}


def test_bad_channel_named_by_alias():
    """A bad channel given by its classic name (t3) marks the requested T7. Common
    practice (same electrode site), no source."""
    out = prepare(_noise(3, 2500), sfreq_hz=250.0, ch_names=["T3", "Cz", "Pz"],
                  power_line_hz=None, bad_channels=["t3"],
                  settings=PrepSettings(notch=False, reference="as_recorded",
                                        bad_channels="drop", channels=("T7", "Cz", "Pz")))
    assert out.channel_status == {"T7": "dropped", "Cz": "good", "Pz": "good"}


def test_missing_channels_error_names_them():
    """Requested channels a recording lacks raise ChannelError naming each of them.
    Common practice, no source."""
    settings = PrepSettings(channels=("Fz", "Cz", "O1", "O2"))
    with pytest.raises(ChannelError) as caught:
        prepare(_noise(2, 2500), sfreq_hz=250.0, ch_names=["Fz", "Cz"], power_line_hz=None,
                bad_channels=[], settings=settings)
    assert isinstance(caught.value, ValueError)
    assert "O1, O2" in str(caught.value)
    assert "Fz" not in str(caught.value).split("(")[0]


def test_non_finite_samples_refused_unless_the_channel_is_bad():
    """NaN in a good channel is refused naming it; in a bad channel that is dropped it does
    no harm (filters act per channel). Common practice, no source."""
    x = _noise(3, 2500)
    x[1, 100:200] = np.nan
    kwargs = dict(sfreq_hz=250.0, ch_names=["Fz", "Cz", "Pz"], power_line_hz=None)
    with pytest.raises(ValueError, match="Cz"):
        prepare(x, bad_channels=[], settings=AS_RECORDED, **kwargs)
    out = prepare(x, bad_channels=["Cz"], settings=PrepSettings(
        notch=False, reference="average", bad_channels="drop"), **kwargs)
    assert np.all(np.isfinite(out.data_v)) and out.ch_names == ["Fz", "Pz"]


# Settings -----------------------------------------------------------------------------------


def test_settings_round_trip_through_json():
    """as_dict is JSON-ready and from_dict restores equal settings. Closed form (identity)."""
    settings = PrepSettings(channels=("Fz", "Cz"), analysis_sfreq_hz=128, overlap=0.25)
    data = json.loads(json.dumps(settings.as_dict()))
    assert data["channels"] == ["Fz", "Cz"]
    assert PrepSettings.from_dict(data) == settings


@pytest.mark.parametrize("data, field", [
    ({"l_freq_hz": 40.0, "h_freq_hz": 40.0}, "l_freq_hz"),
    ({"overlap": 1.0}, "overlap"),
    ({"overlap": -0.1}, "overlap"),
    ({"bad_channels": "median"}, "bad_channels"),
    ({"reference": "Cz"}, "reference"),
    ({"window_s": 0}, "window_s"),
    ({"analysis_sfreq_hz": -1}, "analysis_sfreq_hz"),
    ({"notch": "yes"}, "notch"),
    ({"channels": "Cz"}, "channels"),
    ({"channels": ["T3", "T7"]}, "channels"),
])
def test_settings_errors_name_the_field(data, field):
    """Bad values raise ValueError naming the field. Common practice, no source."""
    with pytest.raises(ValueError, match=field):
        PrepSettings.from_dict(data)


def test_settings_unknown_keys_are_named_with_the_known_ones():
    """Unknown keys raise ValueError naming them and listing the known settings. Common
    practice, no source."""
    with pytest.raises(ValueError, match="lowpass_hz") as caught:
        PrepSettings.from_dict({"lowpass_hz": 30.0, "window_s": 2.0})
    unknown_part, known_part = str(caught.value).split(";")
    assert "window_s" not in unknown_part
    assert "h_freq_hz" in known_part and "window_s" in known_part


# Steps record -------------------------------------------------------------------------------


def test_steps_record_every_step_with_its_parameters():
    """Every step is recorded in order with its parameters, skipped ones with a reason; the
    band-pass's transition bands and length are MNE's defaults (MNE docs: l_trans =
    min(max(l / 4, 2), l) = 0.5 Hz, h_trans = min(max(h / 4, 2), nyquist - h) = 11.25 Hz;
    length 3.3 / 0.5 Hz * 500 Hz = 3300 -> odd 3301, equal to mne.filter.create_filter's),
    and the notch's 3.3 / 0.5 Hz (half its 1 Hz transition) * 500 Hz -> 3301. Reference:
    mne.filter.filter_data / notch_filter documentation, closed forms."""
    x = _noise(5, 5000, seed=8)
    settings = PrepSettings(h_freq_hz=45.0, analysis_sfreq_hz=250.0,
                            channels=("Fz", "Cz", "Pz", "C3"))
    out = prepare(x, sfreq_hz=500.0, ch_names=["Fz", "Cz", "Pz", "C3", "EOG"],
                  power_line_hz=50.0, bad_channels=["Pz"], settings=settings)
    assert [step["step"] for step in out.steps] == [
        "pick_channels", "notch", "bandpass", "resample", "bad_channels", "reference"]
    assert all(step["applied"] for step in out.steps)
    notch = _step(out, "notch")
    assert notch["freqs_hz"] == [50.0]  # 100 Hz lies beyond the 56.25 Hz stopband edge
    assert notch["filter_length"] == 3301
    bandpass = _step(out, "bandpass")
    assert bandpass["l_trans_bandwidth_hz"] == 0.5
    assert bandpass["h_trans_bandwidth_hz"] == 11.25
    assert bandpass["filter_length"] == 3301 == len(
        mne.filter.create_filter(None, 500.0, 0.5, 45.0, verbose=False))
    assert {key: bandpass[key] for key in ("method", "phase", "fir_window")} == {
        "method": "fir", "phase": "zero", "fir_window": "hamming"}
    assert (_step(out, "resample")["up"], _step(out, "resample")["down"]) == (1, 2)
    assert _step(out, "bad_channels")["interpolated"] == ["Pz"]
    assert _step(out, "pick_channels")["left_out"] == ["EOG"]
    json.dumps(out.steps)


# Windows ------------------------------------------------------------------------------------


@pytest.mark.parametrize("n_times, sfreq_hz, window_s, overlap, window, step", [
    (1000, 100.0, 2.0, 0.5, 200, 100),
    (1099, 100.0, 2.0, 0.5, 200, 100),
    (999, 100.0, 2.0, 0.5, 200, 100),
    (1000, 100.0, 2.0, 0.0, 200, 200),
    (1000, 100.0, 2.0, 0.75, 200, 50),
    (15000, 250.0, 4.0, 0.5, 1000, 500),
    (150, 100.0, 2.0, 0.5, 200, 100),
])
def test_window_count_closed_form(n_times, sfreq_hz, window_s, overlap, window, step):
    """Candidates on the grid from sample 0 number floor((n - w) / step) + 1 (none when
    n < w), all kept without bad time or blocks. Closed form."""
    plan = plan_windows(n_times, sfreq_hz=sfreq_hz, window_s=window_s, overlap=overlap)
    expected = 0 if n_times < window else (n_times - window) // step + 1
    assert (plan.window_samples, plan.step_samples) == (window, step)
    assert plan.counts == {"candidates": expected, "kept": expected, "bad_segment": 0,
                           "straddles_blocks": 0, "outside_blocks": 0}
    np.testing.assert_array_equal(plan.starts, np.arange(expected) * step)
    np.testing.assert_array_equal(plan.block, -1)


def test_bad_segment_excludes_exactly_the_windows_touching_it():
    """Hand-drawn: 10 s at 100 Hz, 2 s windows every 1 s (starts 0, 100, ..., 800). Bad time
    3.5-3.7 s (samples 350-369) touches the windows starting at 200 and 300 only; an instant
    at 9.0 s (sample 900) touches those at 800 only (700 ends at 899). Closed form."""
    plan = plan_windows(1000, sfreq_hz=100.0, window_s=2.0, overlap=0.5,
                        bad_segments=[(3.5, 0.2), (9.0, 0.0)])
    np.testing.assert_array_equal(plan.starts, [0, 100, 400, 500, 600, 700])
    assert plan.counts["bad_segment"] == 3
    assert plan.counts["kept"] == 6


def test_blocks_as_events_inside_one_recording():
    """Hand-drawn: blocks 0-4 s and 4-8 s of a 10 s recording at 100 Hz, 2 s windows every
    1 s. Windows at 0, 100, 200 lie in block 0, at 400, 500, 600 in block 1; 300 (3-5 s)
    straddles both; 700 (7-9 s) and 800 (8-10 s) are not inside any block. Closed form."""
    blocks = [{"onset_s": 0.0, "duration_s": 4.0, "condition": "low"},
              {"onset_s": 4.0, "duration_s": 4.0, "condition": "high"}]
    plan = plan_windows(1000, sfreq_hz=100.0, window_s=2.0, overlap=0.5, blocks=blocks)
    np.testing.assert_array_equal(plan.starts, [0, 100, 200, 400, 500, 600])
    np.testing.assert_array_equal(plan.block, [0, 0, 0, 1, 1, 1])
    assert plan.counts == {"candidates": 9, "kept": 6, "bad_segment": 0,
                           "straddles_blocks": 1, "outside_blocks": 2}


def test_each_candidate_is_counted_once_in_priority_order():
    """Hand-drawn, as above plus bad time at 3.9-4.1 s: it touches windows 200, 300 (the
    straddling one) and 400, which count as bad_segment, not straddles; the counts add up to
    the candidates. Closed form."""
    blocks = [{"onset_s": 0.0, "duration_s": 4.0}, {"onset_s": 4.0, "duration_s": 4.0}]
    plan = plan_windows(1000, sfreq_hz=100.0, window_s=2.0, overlap=0.5, blocks=blocks,
                        bad_segments=[(3.9, 0.2)])
    assert plan.counts == {"candidates": 9, "kept": 4, "bad_segment": 3,
                           "straddles_blocks": 0, "outside_blocks": 2}
    np.testing.assert_array_equal(plan.starts, [0, 100, 500, 600])
    np.testing.assert_array_equal(plan.block, [0, 0, 1, 1])


def test_cut_windows_is_a_copy_of_the_planned_slices():
    """Each window equals data[:, start:start + w]; editing the result leaves data alone.
    Closed form (slicing)."""
    data = np.arange(3 * 1000, dtype=float).reshape(3, 1000)
    plan = plan_windows(1000, sfreq_hz=100.0, window_s=2.0, overlap=0.5,
                        bad_segments=[(3.5, 0.2)])
    windows = cut_windows(data, plan)
    assert windows.shape == (7, 3, 200)  # 9 candidates, 2 touch the bad time
    for window, start in zip(windows, plan.starts, strict=True):
        np.testing.assert_array_equal(window, data[:, start:start + 200])
    windows[:] = -1.0
    assert data.min() == 0.0


@pytest.mark.parametrize("kwargs, field", [
    ({"overlap": 1.0}, "overlap"),
    ({"window_s": 0.0}, "window_s"),
    ({"blocks": [{"onset_s": 0.0}]}, "duration_s"),
    ({"bad_segments": [(1.0, -0.5)]}, "duration_s"),
])
def test_window_errors_name_the_field(kwargs, field):
    """Bad window parameters raise ValueError naming the field. Common practice, no
    source."""
    with pytest.raises(ValueError, match=field):
        plan_windows(1000, sfreq_hz=100.0, **{"window_s": 2.0, "overlap": 0.5, **kwargs})


# pyedflib's test recording ------------------------------------------------------------------


def test_pyedflib_generator_sines_through_the_bandpass():
    """pyedflib's test_generator.edf (11 signals at 200 Hz; first 60 s): after the 0.5-40 Hz
    band-pass 'sine 50 Hz' is at least 40 dB below its raw RMS and 'sine 8.5 Hz' within
    0.5 dB. RMS is taken half a filter length (1321 // 2 samples, mne.filter.create_filter)
    away from the ends: there the filter's edge transient (its padding meets the sine at a
    peak) is not the pass-band response. Reference: pyedflib's shipped file; the design
    target as in the band-pass test."""
    pyedflib = pytest.importorskip("pyedflib")
    source = os.path.join(os.path.dirname(pyedflib.__file__), "data", "test_generator.edf")
    raw = mne.io.read_raw_edf(source, verbose="ERROR")
    sfreq_hz = raw.info["sfreq"]
    data = raw.get_data(stop=int(60 * sfreq_hz))
    out = prepare(data, sfreq_hz=sfreq_hz, ch_names=raw.ch_names, power_line_hz=None,
                  bad_channels=[], settings=AS_RECORDED)
    assert out.ch_names == raw.ch_names and len(out.ch_names) == 11
    edge = len(mne.filter.create_filter(None, sfreq_hz, 0.5, 40.0, verbose=False)) // 2

    def rms_db(name):
        row = raw.ch_names.index(name)
        before = np.sqrt(np.mean(data[row, edge:-edge] ** 2))
        after = np.sqrt(np.mean(out.data_v[row, edge:-edge] ** 2))
        return 20 * np.log10(after / before)

    assert rms_db("sine 50 Hz") <= -40.0
    assert abs(rms_db("sine 8.5 Hz")) <= 0.5
