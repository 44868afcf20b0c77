"""The spectral, time-domain, distribution and index features against reference libraries
(mne-features 0.3.2, antropy 0.2.3, scipy.stats) and closed forms.

The feature modules are imported directly, not through ``registry()``, so that these tests do
not depend on the complexity family. mne-features and antropy are test references only: the
feature code must not import them (checked below). Importing the two costs about 12 s of
numba compilation on these machines, most of this file's run time.
"""

import ast
import functools
from pathlib import Path

import mne
import numpy as np
import pytest
import pywt
import scipy.stats
from scipy import signal

from cairn_science.features import distribution, indices, spectral, timedomain
from cairn_science.features.batch import WindowBatch
from cairn_science.features.registry import FAMILIES, Band
from fixtures.demo.signals import colored_noise, narrowband_noise

antropy = pytest.importorskip("antropy")
mne_features_univariate = pytest.importorskip("mne_features.univariate")
mne_features_utils = pytest.importorskip("mne_features.utils")

FEATURES_DIR = Path(__file__).resolve().parents[2] / "cairn_science" / "features"
MODULES = (spectral, timedomain, distribution, indices)

SFREQ_HZ = 256.0
N_SAMPLES = 1024  # 4 s windows
NPERSEG = 512  # the batch's 2 s Welch segments at 256 Hz
DF_HZ = SFREQ_HZ / NPERSEG  # 0.5 Hz bins
BANDS = [Band("delta", 1.0, 4.0), Band("theta", 4.0, 8.0), Band("alpha", 8.0, 13.0),
         Band("beta", 13.0, 30.0)]
CH_NAMES = ["Fp1", "AF3", "Fz", "F4", "FC1", "Cz", "CP2", "Pz", "P3", "PO4"]
# The same PSD as the batch's through mne_features.utils.power_spectrum: one 2 s FFT per
# segment, no zero padding, half overlap.
PSD_PARAMS = {"welch_n_fft": NPERSEG, "welch_n_per_seg": NPERSEG, "welch_n_overlap": NPERSEG // 2}


def _eeg_like(n_windows=3, n_channels=len(CH_NAMES), *, seed=0, offset_uv=0.0):
    """(n_windows, n_channels, N_SAMPLES) µV: 1/f background, an alpha rhythm, a DC offset."""
    rng = np.random.default_rng(seed)
    n = n_windows * n_channels
    background = colored_noise(n_signals=n, n_times=N_SAMPLES, sfreq_hz=SFREQ_HZ, exponent=1.0,
                               knee_hz=25.0, rng=rng)
    alpha = narrowband_noise(n_signals=n, n_times=N_SAMPLES, sfreq_hz=SFREQ_HZ, centre_hz=10.0,
                             width_hz=1.0, rng=rng)
    x = 15.0 * background + 8.0 * alpha + offset_uv
    return x.reshape(n_windows, n_channels, N_SAMPLES)


def _band_filtered(x, band):
    sos = signal.butter(4, [band.l_freq_hz, band.h_freq_hz], btype="bandpass", fs=SFREQ_HZ,
                        output="sos")
    return signal.sosfiltfilt(sos, x, axis=-1)


def _batch(x, *, ch_names=None, bands=BANDS, band_windows=None, sfreq_hz=SFREQ_HZ):
    ch_names = ch_names or CH_NAMES[: x.shape[1]]
    return WindowBatch(x, sfreq_hz=sfreq_hz, ch_names=ch_names, bands=bands,
                       band_windows_uv=band_windows)


def _sines(amplitudes_uv, freqs_hz, *, seed=1):
    """Sum of sines, amplitudes (n_windows, n_channels, n_sines), random phases."""
    amplitudes_uv = np.asarray(amplitudes_uv, dtype=float)
    rng = np.random.default_rng(seed)
    phases = rng.uniform(0, 2 * np.pi, amplitudes_uv.shape)
    t = np.arange(N_SAMPLES) / SFREQ_HZ
    waves = np.sin(2 * np.pi * np.asarray(freqs_hz)[:, None] * t + phases[..., None])
    return (amplitudes_uv[..., None] * waves).sum(axis=-2)


@pytest.fixture
def mne_features_hann(monkeypatch):
    """mne-features' ``power_spectrum`` calls ``mne.time_frequency.psd_array_welch`` with
    mne's default window, Hamming, and ``psd_params`` cannot change it; the batch uses Hann
    (as scipy and antropy do). The window is given to mne here, so the rest of the
    reference (mne's Welch, mne-features' band summation) is compared as it is."""
    monkeypatch.setattr(mne_features_utils, "psd_array_welch",
                        functools.partial(mne.time_frequency.psd_array_welch, window="hann"))


def _mne_features_band_powers(x, bands, *, normalize):
    """compute_pow_freq_bands for each window, (n_windows, n_channels, n_bands). Its bands
    include both edges, so each band is passed as [l, h - df/2]: the same bins as [l, h)
    (the upper edge at most Nyquist, which mne-features requires)."""
    freq_bands = np.array([[band.l_freq_hz, min(band.h_freq_hz - DF_HZ / 2, SFREQ_HZ / 2)]
                           for band in bands])
    return np.stack([
        mne_features_univariate.compute_pow_freq_bands(
            SFREQ_HZ, window, freq_bands=freq_bands, normalize=normalize,
            psd_params=PSD_PARAMS).reshape(x.shape[1], len(bands))
        for window in x
    ])


# --- spectral ------------------------------------------------------------------------------

def test_absolute_power_equals_mne_features_pow_freq_bands(mne_features_hann):
    """Source: mne_features.univariate.compute_pow_freq_bands(normalize=False) with
    psd_params n_fft = n_per_seg = 512, n_overlap = 256 and mne's Welch window set to Hann.
    It sums the PSD over the band's bins without the bin width: absolute_power = 0.5 Hz ×
    its value. Tolerance: rtol 1e-10 (the same arithmetic in another order)."""
    x = _eeg_like()
    batch = _batch(x)
    ours = np.stack([spectral.absolute_power(batch, band) for band in BANDS], axis=-1)
    reference = _mne_features_band_powers(x, BANDS, normalize=False)
    np.testing.assert_allclose(ours, DF_HZ * reference, rtol=1e-10)


def test_relative_power_equals_mne_features_normalized(mne_features_hann):
    """Source: compute_pow_freq_bands(normalize=True), which divides by the PSD summed over
    every bin from 0 Hz to Nyquist; relative_power divides by the power over the union of
    the study's bands. So (1) for the study's bands 1–30 Hz, relative_power = its value /
    the sum of its values over the four bands; (2) for study bands tiling 0 Hz to past
    Nyquist, relative_power = its value. Tolerance: rtol 1e-10."""
    x = _eeg_like()
    ours = np.stack([spectral.relative_power(_batch(x), band) for band in BANDS], axis=-1)
    reference = _mne_features_band_powers(x, BANDS, normalize=True)
    np.testing.assert_allclose(ours, reference / reference.sum(axis=-1, keepdims=True),
                               rtol=1e-10)
    np.testing.assert_allclose(ours.sum(axis=-1), 1.0, rtol=1e-12)

    tiling = [Band("low", 0.0, 20.0), Band("middle", 20.0, 64.0),
              Band("high", 64.0, SFREQ_HZ / 2 + DF_HZ)]
    ours = np.stack([spectral.relative_power(_batch(x, bands=tiling), band) for band in tiling],
                    axis=-1)
    np.testing.assert_allclose(ours, _mne_features_band_powers(x, tiling, normalize=True),
                               rtol=1e-10)


def test_relative_power_counts_overlapping_bins_once():
    """Closed form: with bands alpha 8–13 and upper alpha 10–13, the denominator is the power
    in 8–13 Hz, once."""
    x = _eeg_like(n_windows=1)
    bands = [Band("alpha", 8.0, 13.0), Band("upper_alpha", 10.0, 13.0)]
    batch = _batch(x, bands=bands)
    np.testing.assert_allclose(spectral.relative_power(batch, bands[0]), 1.0, rtol=1e-12)
    np.testing.assert_allclose(spectral.relative_power(batch, bands[1]),
                               batch.band_power(10, 13) / batch.band_power(8, 13), rtol=1e-12)


def test_sine_band_power_parseval():
    """Closed form (Parseval): a sine of amplitude A has mean power A²/2. The sum of the
    absolute band powers over the bands holding the sines is A²/2 per sine; the Hann
    window's leakage farther than 2 Hz (4 bins) from a sine is below 1e-4 of its power at
    4 s windows, hence a tolerance of 1e-4 of the window's total power A²/2 summed over its
    sines (seen: about 1e-5). The sines sit off the bins (10.1, 10.4, 21.3 Hz) with random
    phases."""
    amplitudes = np.array([[[20.0, 0.0]], [[5.0, 3.0]], [[1.0, 12.0]]])  # 3 windows, 1 channel
    x = _sines(amplitudes, [10.1, 21.3])
    batch = _batch(x, ch_names=["Pz"])
    expected = amplitudes ** 2 / 2
    tolerance = 1e-4 * expected.sum(axis=-1)
    alpha = spectral.absolute_power(batch, BANDS[2])
    beta = spectral.absolute_power(batch, BANDS[3])
    assert np.all(np.abs(alpha - expected[..., 0]) <= tolerance)
    assert np.all(np.abs(beta - expected[..., 1]) <= tolerance)
    total = sum(spectral.absolute_power(batch, band) for band in BANDS)
    np.testing.assert_allclose(total, expected.sum(axis=-1), rtol=1e-4)

    x = _sines([[[7.0]]], [10.4])
    np.testing.assert_allclose(spectral.absolute_power(_batch(x, ch_names=["Pz"]), BANDS[2]),
                               49.0 / 2, rtol=1e-4)


def test_peak_alpha_frequency_of_sines():
    """Closed form: a sine at f in the search range peaks at f. Without interpolation the
    answer is the nearest 0.5 Hz bin; with parabolic interpolation it is within 0.1 Hz (the
    Hann main lobe is not a parabola: the fit's bias is at most about 0.05 Hz), and exact (to
    1e-3 Hz) halfway between bins, where the two bins are equal by symmetry. A larger
    theta sine outside the range is ignored."""
    freqs = np.array([10.1, 10.25, 9.8, 11.7])
    x = np.concatenate([_sines([[[10.0, 30.0]]], [f, 5.0]) for f in freqs])  # 4 windows
    batch = _batch(x, ch_names=["Pz"])
    plain = spectral.peak_alpha_frequency(batch, interpolate=False)[:, 0]
    np.testing.assert_array_equal(plain, [10.0, 10.5, 10.0, 11.5])
    refined = spectral.peak_alpha_frequency(batch)[:, 0]
    np.testing.assert_allclose(refined, freqs, atol=0.1)
    assert np.all(np.abs(refined - freqs) < np.abs(plain - freqs))
    assert abs(refined[1] - 10.25) < 1e-3
    with pytest.raises(ValueError, match="no spectral bin"):
        spectral.peak_alpha_frequency(batch, l_freq_hz=10.1, h_freq_hz=10.2)


def test_spectral_entropy_equals_antropy():
    """Source: antropy.spectral_entropy(x, sf, method="welch", nperseg=512, normalize=True)
    (scipy's Welch, Hann, half overlap: the batch's spectrum); with normalize=False (bits)
    it is ours × log2(n_bins). Tolerance: rtol 1e-12."""
    x = _eeg_like()
    ours = spectral.spectral_entropy(_batch(x))
    normalised = antropy.spectral_entropy(x, SFREQ_HZ, method="welch", nperseg=NPERSEG,
                                          normalize=True)
    np.testing.assert_allclose(ours, normalised, rtol=1e-12)
    bits = antropy.spectral_entropy(x, SFREQ_HZ, method="welch", nperseg=NPERSEG)
    np.testing.assert_allclose(ours * np.log2(NPERSEG // 2 + 1), bits, rtol=1e-12)


# --- time domain ---------------------------------------------------------------------------

def test_line_length_equals_mne_features():
    """Source: mne_features.univariate.compute_line_length, the mean of |diff| (not the sum),
    on the broadband and on a band-filtered signal. Tolerance: rtol 1e-12."""
    x = _eeg_like()
    theta = _band_filtered(x, BANDS[1])
    batch = _batch(x, band_windows={"theta": theta})
    for band, data in ((None, x), (BANDS[1], theta)):
        reference = np.stack([mne_features_univariate.compute_line_length(w) for w in data])
        np.testing.assert_allclose(timedomain.line_length(batch, band), reference, rtol=1e-12)


def test_teager_kaiser_energy_equals_mne_features():
    """Source: mne_features.univariate.compute_teager_kaiser_energy, which returns, per
    channel and per level of pywt.wavedec(x, "db4", level=min(dwt_max_level, 6)) (the
    approximation first, then the details), the mean and the SD of the Teager-Kaiser
    operator x[n]² - x[n-1]x[n+1] over that coefficient sequence. Compared: its "mean"
    outputs with teager_kaiser_energy of a batch whose windows are those coefficients, level
    by level; and mne-features' operator itself (the private _tk_energy) averaged over the
    signal, with ours on the signal. Tolerance: rtol 1e-10."""
    x = _eeg_like(n_windows=2)
    n_channels = x.shape[1]
    level = min(pywt.dwt_max_level(N_SAMPLES, pywt.Wavelet("db4").dec_len), 6)
    coefs = pywt.wavedec(x, "db4", level=level)  # axis -1
    reference = np.stack([
        mne_features_univariate.compute_teager_kaiser_energy(w).reshape(n_channels, level + 1, 2)
        for w in x
    ])
    assert len(coefs) == level + 1
    for j, coef in enumerate(coefs):
        ours = timedomain.teager_kaiser_energy(_batch(coef))
        np.testing.assert_allclose(ours, reference[:, :, j, 0], rtol=1e-10)

    direct = np.stack([mne_features_univariate._tk_energy(w).mean(axis=-1) for w in x])
    np.testing.assert_allclose(timedomain.teager_kaiser_energy(_batch(x)), direct, rtol=1e-10)


def test_teager_kaiser_energy_of_a_sine():
    """Closed form: for A·sin(ωn + φ), x[n]² - x[n-1]x[n+1] = A² sin²(ω) at every n (ω in
    rad/sample), so the mean is A² sin²(ω) up to float error (rtol 1e-10)."""
    n = np.arange(N_SAMPLES)
    amplitudes = np.array([1.0, 7.5, 40.0])
    omegas = np.array([0.05, 0.3, 1.9])
    phases = np.array([0.0, 1.0, 2.5])
    x = amplitudes[:, None] * np.sin(omegas[:, None] * n + phases[:, None])
    ours = timedomain.teager_kaiser_energy(_batch(x[None], ch_names=["a", "b", "c"]))
    np.testing.assert_allclose(ours[0], amplitudes ** 2 * np.sin(omegas) ** 2, rtol=1e-10)


def test_hjorth_equals_antropy():
    """Source: antropy.hjorth_params(x) without sf (mobility per sample, ddof=0 variances),
    on the broadband and on a band-filtered signal. Tolerance: rtol 1e-12."""
    x = _eeg_like()
    alpha = _band_filtered(x, BANDS[2])
    batch = _batch(x, band_windows={"alpha": alpha})
    for band, data in ((None, x), (BANDS[2], alpha)):
        mobility, complexity = antropy.hjorth_params(data)
        np.testing.assert_allclose(timedomain.hjorth_mobility(batch, band), mobility,
                                   rtol=1e-12)
        np.testing.assert_allclose(timedomain.hjorth_complexity(batch, band), complexity,
                                   rtol=1e-12)


def test_zero_crossings_equal_antropy():
    """Source: antropy.num_zerocross (normalize=False): of the raw signal with
    remove_mean=False, of x - mean(x) by default. Exact (integer counts). The signal carries
    a 30 µV offset, so the two differ."""
    x = _eeg_like(offset_uv=30.0)
    x[0, 0, 100:110] = 0.0  # exact zeros count as positive, as in antropy
    batch = _batch(x)
    raw = timedomain.zero_crossings(batch, remove_mean=False)
    np.testing.assert_array_equal(raw, antropy.num_zerocross(x))
    centred = timedomain.zero_crossings(batch)
    np.testing.assert_array_equal(
        centred, antropy.num_zerocross(x - x.mean(axis=-1, keepdims=True)))
    assert np.all(centred > raw)


def test_peak_count():
    """Closed form and scipy: a 10 Hz sine over 4 s has 40 maxima; on noise (no two equal
    samples) the count equals len(scipy.signal.find_peaks(x)[0]). A flat top is not a
    strict maximum, where find_peaks counts one."""
    t = np.arange(N_SAMPLES) / SFREQ_HZ
    sine = np.sin(2 * np.pi * 10.0 * t + 0.3)
    assert timedomain.peak_count(_batch(sine[None, None], ch_names=["Cz"]))[0, 0] == 40
    x = _eeg_like()
    expected = np.array([[len(signal.find_peaks(ch)[0]) for ch in w] for w in x])
    np.testing.assert_array_equal(timedomain.peak_count(_batch(x)), expected)
    plateau = np.array([[[0.0, 1.0, 1.0, 0.0, 2.0, 0.0]]])
    assert timedomain.peak_count(_batch(plateau, ch_names=["Cz"]))[0, 0] == 1
    assert len(signal.find_peaks(plateau[0, 0])[0]) == 2


# --- distribution --------------------------------------------------------------------------

@pytest.mark.filterwarnings("ignore:Precision loss occurred:RuntimeWarning")
def test_moments_equal_scipy_and_numpy():
    """Source: scipy.stats.skew and scipy.stats.kurtosis with their defaults (bias=True,
    fisher=True), numpy mean and std(ddof=0). Tolerance: rtol 1e-12 (atol 1e-12 for
    moments near 0). A constant window is NaN in both."""
    x = _eeg_like(offset_uv=-12.0)
    x[1, 2] = 4.0  # constant
    x[2, 3] = np.exp(np.linspace(0, 3, N_SAMPLES))  # skewed
    batch = _batch(x)
    skew = scipy.stats.skew(x, axis=-1)  # warns of the constant window
    kurt = scipy.stats.kurtosis(x, axis=-1)
    np.testing.assert_allclose(distribution.skewness(batch), skew, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(distribution.kurtosis(batch), kurt, rtol=1e-12, atol=1e-12)
    assert np.isnan(distribution.skewness(batch)[1, 2])
    assert np.isnan(distribution.kurtosis(batch)[1, 2])
    np.testing.assert_allclose(distribution.mean(batch), x.mean(axis=-1), rtol=1e-12)
    np.testing.assert_allclose(distribution.standard_deviation(batch), x.std(axis=-1),
                               rtol=1e-12)


# --- indices -------------------------------------------------------------------------------

def test_engagement_index_equals_formula(mne_features_hann):
    """Hand formula beta / (alpha + theta) on (1) compute_pow_freq_bands' band powers
    (PSD as in the absolute-power test), rtol 1e-10; (2) sines of amplitudes a_θ (6.2 Hz),
    a_α (10.3 Hz), a_β (19.6 Hz), band powers a²/2: (a_β²/2) / ((a_α² + a_θ²)/2), rtol 1e-3
    (leakage)."""
    x = _eeg_like()
    powers = _mne_features_band_powers(x, BANDS, normalize=False) * DF_HZ
    theta, alpha, beta = powers[..., 1], powers[..., 2], powers[..., 3]
    np.testing.assert_allclose(indices.engagement_index(_batch(x)), beta / (alpha + theta),
                               rtol=1e-10)

    amplitudes = np.array([[[4.0, 10.0, 3.0], [8.0, 2.0, 6.0]]])  # theta, alpha, beta
    x = _sines(amplitudes, [6.2, 10.3, 19.6])
    expected = amplitudes[..., 2] ** 2 / (amplitudes[..., 0] ** 2 + amplitudes[..., 1] ** 2)
    np.testing.assert_allclose(indices.engagement_index(_batch(x, ch_names=["Cz", "Pz"])),
                               expected, rtol=1e-3)


def test_frontal_theta_parietal_alpha_equals_formula(mne_features_hann):
    """Hand formula on compute_pow_freq_bands' band powers: mean theta over the frontal
    channels (Fp1, AF3, Fz, F4 here; not FC1) over mean alpha over the parietal ones (Pz, P3;
    not CP2, PO4), rtol 1e-10; and on sines with known powers a²/2, rtol 1e-3. Channel names
    are matched case-insensitively; without a frontal or a parietal channel the index is
    NaN."""
    x = _eeg_like()
    powers = _mne_features_band_powers(x, BANDS, normalize=False) * DF_HZ
    frontal, parietal = [0, 1, 2, 3], [7, 8]
    assert indices.frontal_channels(CH_NAMES) == frontal
    assert indices.parietal_channels(CH_NAMES) == parietal
    expected = powers[:, frontal, 1].mean(axis=-1) / powers[:, parietal, 2].mean(axis=-1)
    ours = indices.frontal_theta_parietal_alpha(_batch(x))
    assert ours.shape == (x.shape[0],)
    np.testing.assert_allclose(ours, expected, rtol=1e-10)

    names = ["FP2", "f7", "FT7", "pz", "P4", "PO3", "TP8"]
    theta_uv = np.array([6.0, 2.0, 50.0, 50.0, 50.0, 50.0, 50.0])
    alpha_uv = np.array([50.0, 50.0, 50.0, 9.0, 3.0, 50.0, 50.0])
    x = _sines(np.stack([theta_uv, alpha_uv], axis=-1)[None], [5.7, 10.6])
    expected = np.mean([36.0, 4.0]) / np.mean([81.0, 9.0])
    np.testing.assert_allclose(indices.frontal_theta_parietal_alpha(_batch(x, ch_names=names)),
                               [expected], rtol=1e-3)

    no_parietal = _batch(_eeg_like(n_windows=2, n_channels=3), ch_names=["Fz", "Cz", "PO3"])
    assert np.isnan(indices.frontal_theta_parietal_alpha(no_parietal)).all()
    no_frontal = _batch(_eeg_like(n_windows=2, n_channels=3), ch_names=["FC1", "Cz", "P3"])
    assert np.isnan(indices.frontal_theta_parietal_alpha(no_frontal)).all()


def test_indices_name_a_missing_band():
    """A study without a beta band cannot have an engagement index; the error names it."""
    batch = _batch(_eeg_like(n_windows=1), bands=BANDS[:3])
    with pytest.raises(ValueError, match="'beta'"):
        indices.engagement_index(batch)
    batch = _batch(_eeg_like(n_windows=1), bands=[BANDS[0], BANDS[2]])
    with pytest.raises(ValueError, match="'theta'"):
        indices.frontal_theta_parietal_alpha(batch)


# --- the modules ---------------------------------------------------------------------------

def _imported_modules(tree):
    """Every module name an AST imports: import/from-import statements, and calls of
    importlib.import_module / __import__ with a literal name."""
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            yield from (alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module:
            yield node.module
        elif isinstance(node, ast.Call):
            func = node.func
            name = func.attr if isinstance(func, ast.Attribute) else getattr(func, "id", None)
            if name in ("import_module", "__import__") and node.args \
                    and isinstance(node.args[0], ast.Constant) \
                    and isinstance(node.args[0].value, str):
                yield node.args[0].value


def test_feature_code_does_not_import_the_references():
    """Every .py under cairn_science/features/ (whoever wrote it): no form of importing antropy or
    mne_features, which are test references only."""
    files = sorted(FEATURES_DIR.rglob("*.py"))
    assert {path.name for path in files} >= {"spectral.py", "timedomain.py", "distribution.py",
                                             "indices.py", "registry.py", "batch.py"}
    offenders = []
    for path in files:
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        for module in _imported_modules(tree):
            if module.split(".")[0] in ("antropy", "mne_features"):
                offenders.append(f"{path.name}: {module}")
    assert offenders == []


def test_every_feature_has_the_registry_shape():
    """Each FEATURES entry of the four modules on a small batch of noise (2 windows, the ten
    channels, 4 s at 256 Hz, with band-filtered windows for every band): (n_windows,
    n_channels), or (n_windows,) for per_channel=False, and finite; per_band features for
    each band, on_bands features on the broadband and on each band-filtered signal."""
    x = _eeg_like(n_windows=2, seed=5)
    batch = _batch(x, band_windows={band.name: _band_filtered(x, band) for band in BANDS})
    names = []
    for module in MODULES:
        assert module.FEATURES
        for feature in module.FEATURES:
            assert feature.family in FAMILIES
            names.append(feature.name)
            if feature.per_band:
                runs = BANDS
            elif feature.on_bands:
                runs = [None, *BANDS]
            else:
                runs = [None]
            for band in runs:
                values = feature.function(batch, band=band, **feature.params())
                shape = (2, len(CH_NAMES)) if feature.per_channel else (2,)
                assert values.shape == shape, (feature.name, band)
                assert np.isfinite(values).all(), (feature.name, band)
    assert len(names) == len(set(names))
    assert {module.FEATURES[0].family for module in MODULES} == {"spectral", "time",
                                                                 "distribution", "index"}
