"""Complexity features against their references and closed forms.

References: antropy 0.2.3 (``app_entropy``, ``sample_entropy``, ``detrended_fluctuation``)
and mne-features 0.3.2 (``compute_app_entropy``, ``compute_samp_entropy``,
``compute_hurst_exp``), called on the same windows. Windows: white noise, noise band-passed
to 8-13 Hz (4th-order Butterworth, zero phase, 256 Hz) and a 10 Hz sine, of 500 and 1,024
samples.

Tolerances against the references: the entropies count the same matches, so they differ only
by the order in which the logs are summed (seen: <= 2e-14; asserted 1e-10); sample entropy is
-log of the same ratio of integers (asserted 1e-12); DFA and Hurst differ by summation order
and, for Hurst, by a running instead of a two-pass SD (seen: <= 2e-13; asserted 1e-9).
"""

import antropy
import numpy as np
import pytest
from mne_features.univariate import (
    compute_app_entropy,
    compute_hurst_exp,
    compute_samp_entropy,
)
from scipy import signal

from cairn_science.features.batch import WindowBatch
from cairn_science.features.complexity import (
    FEATURES,
    _hurst_splits,
    _slopes,
    approximate_entropy,
    dfa_exponent,
    hurst_exponent,
    sample_entropy,
)
from cairn_science.features.registry import Band

SFREQ_HZ = 256.0
LENGTHS = (500, 1024)
ROWS = 4


def _windows(kind, n_samples, seed=0):
    """(ROWS, n_samples) float64 C-contiguous windows of one kind."""
    rng = np.random.default_rng(seed)
    if kind == "noise":
        x = rng.standard_normal((ROWS, n_samples))
    elif kind == "filtered":
        sos = signal.butter(4, [8.0, 13.0], btype="bandpass", fs=SFREQ_HZ, output="sos")
        x = signal.sosfiltfilt(sos, rng.standard_normal((ROWS, n_samples + 512)))[:, 256:-256]
    else:
        t = np.arange(n_samples) / SFREQ_HZ
        phases = rng.uniform(0, 2 * np.pi, (ROWS, 1))
        x = 20.0 * np.sin(2 * np.pi * 10.0 * t + phases)
    return np.ascontiguousarray(x, dtype=np.float64)


CASES = [(kind, n) for kind in ("noise", "filtered", "sine") for n in LENGTHS]


def _each(function, x, **kwargs):
    return np.array([function(np.ascontiguousarray(row), **kwargs) for row in x])


# --- approximate entropy -------------------------------------------------------------------

@pytest.mark.parametrize("kind,n_samples", CASES)
def test_approximate_entropy_equals_antropy(kind, n_samples):
    """antropy.app_entropy: tolerance 0.2 x np.std(x) (ddof=0), Chebyshev, <= r (KDTree)."""
    x = _windows(kind, n_samples)
    np.testing.assert_allclose(approximate_entropy(x), _each(antropy.app_entropy, x),
                               rtol=0, atol=1e-10)


@pytest.mark.parametrize("kind,n_samples", CASES)
def test_approximate_entropy_equals_mne_features(kind, n_samples):
    """mne_features compute_app_entropy fixes the tolerance at 0.2 x np.std(x, ddof=1) and
    takes no tolerance parameter, so ours is given r = 0.2 x sqrt(n / (n - 1)): the same
    tolerance on our ddof=0 SD."""
    x = _windows(kind, n_samples)
    r = 0.2 * np.sqrt(n_samples / (n_samples - 1))
    np.testing.assert_allclose(approximate_entropy(x, r=r), compute_app_entropy(x),
                               rtol=0, atol=1e-10)


@pytest.mark.parametrize("m,r", [(3, 0.2), (2, 0.35), (4, 0.3)])
def test_approximate_entropy_other_parameters_equal_antropy(m, r):
    """Orders other than 2 take the kernel's general path; antropy's order and tolerance
    (an absolute value: r x SD) are given to match."""
    x = np.concatenate([_windows("noise", 500), _windows("filtered", 500)])
    expected = np.array([antropy.app_entropy(row, order=m, tolerance=float(r * row.std()))
                         for row in x])
    np.testing.assert_allclose(approximate_entropy(x, m=m, r=r), expected, rtol=0, atol=1e-10)


def test_approximate_entropy_of_a_constant_is_zero():
    """Closed form: every template matches every other at tolerance 0, so
    phi(m) = phi(m + 1) = log 1 = 0."""
    x = np.full((2, 300), 3.7)
    assert np.array_equal(approximate_entropy(x), [0.0, 0.0])


# --- sample entropy -------------------------------------------------------------------------

@pytest.mark.parametrize("kind,n_samples", CASES)
def test_sample_entropy_equals_antropy(kind, n_samples):
    """antropy.sample_entropy (its numba path under 5,000 samples), tolerance 0.2 x SD."""
    x = _windows(kind, n_samples)
    np.testing.assert_allclose(sample_entropy(x), _each(antropy.sample_entropy, x),
                               rtol=0, atol=1e-12)


@pytest.mark.parametrize("m,r", [(3, 0.2), (2, 0.35), (4, 0.3)])
def test_sample_entropy_other_parameters_equal_antropy(m, r):
    x = np.concatenate([_windows("noise", 1024), _windows("filtered", 1024)])
    expected = np.array([antropy.sample_entropy(row, order=m, tolerance=float(r * row.std()))
                         for row in x])
    np.testing.assert_allclose(sample_entropy(x, m=m, r=r), expected, rtol=0, atol=1e-12)


def test_sample_entropy_equals_mne_features():
    """mne_features compute_samp_entropy: same ddof=1 tolerance as its ApEn (see above)."""
    x = np.concatenate([_windows("noise", 500), _windows("sine", 500)])
    r = 0.2 * np.sqrt(500 / 499)
    np.testing.assert_allclose(sample_entropy(x, r=r), compute_samp_entropy(x),
                               rtol=0, atol=1e-10)


def test_sample_entropy_without_matches_follows_antropy():
    """antropy's convention: nan when no pair matches at length m (undefined), inf when pairs
    match at m and none at m + 1. Row 1: distinct values at tolerance 0. Row 2: the length-2
    templates at starts 0 and 3 are equal, their length-3 extensions are not."""
    distinct = np.arange(12, dtype=float) ** 1.5
    one_pair = np.array([0.0, 0.0, 1.0, 0.0, 0.0, 2.0, 7.0, 11.0, 16.0, 22.0, 29.0, 37.0])
    ours = np.concatenate([sample_entropy(distinct[None], r=0.0),
                           sample_entropy(one_pair[None], r=0.01)])
    assert np.isnan(ours[0]) and ours[1] == np.inf
    assert np.isnan(antropy.sample_entropy(distinct, tolerance=0.0))
    assert antropy.sample_entropy(one_pair, tolerance=0.01 * one_pair.std()) == np.inf


def test_sample_entropy_of_a_constant_is_zero():
    """Every pair matches at both lengths (distance 0 <= tolerance 0): -log 1 = 0."""
    assert np.array_equal(sample_entropy(np.full((1, 200), -2.0)), [0.0])


# --- Hurst exponent -------------------------------------------------------------------------

@pytest.mark.parametrize("kind,n_samples", CASES)
def test_hurst_exponent_equals_mne_features(kind, n_samples):
    """mne_features compute_hurst_exp (Anis-Lloyd/Peters-corrected R/S)."""
    x = _windows(kind, n_samples)
    np.testing.assert_allclose(hurst_exponent(x), compute_hurst_exp(x), rtol=0, atol=1e-9)


def test_hurst_correction_carries_the_known_small_sample_bias():
    """Classic R/S on short series is biased upward (Anis & Lloyd 1976; Peters 1994 - recalled,
    not checked against the papers: about 0.55-0.65 for N near 1,000 instead of 0.5). The
    Anis-Lloyd/Peters expected R/S that mne-features subtracts shows it: its log-log slope
    over the sub-series lengths used for 1,024 samples lies in that range (0.556 seen)."""
    splits, correction = _hurst_splits(1024)
    expected_log_rs = correction + np.log(splits) / 2
    slope = _slopes(np.log(splits), expected_log_rs[None])[0]
    assert 0.55 < slope < 0.65


def test_hurst_exponent_of_white_noise_is_near_one_half():
    """White noise has H = 0.5. This estimator subtracts the expected R/S above but takes R/S
    as a mean over every prefix of each chunk, whose own slope is flatter (0.528 seen over 200
    series of 1,024 samples), so it lands a little below 0.5: mean 0.472, SD 0.047 per series
    (seen, 200 series). Over 32 seeded series the mean's standard error is about 0.008, so
    0.5 +- 0.06 leaves the bias plus four standard errors."""
    x = np.random.default_rng(7).standard_normal((32, 1024))
    assert abs(np.mean(hurst_exponent(x)) - 0.5) < 0.06


def test_hurst_exponent_of_a_constant_is_nan():
    """Every prefix SD is 0, so no R/S is defined."""
    assert np.isnan(hurst_exponent(np.full((1, 512), 1.0))).all()


# --- DFA ------------------------------------------------------------------------------------

@pytest.mark.parametrize("kind,n_samples", CASES)
def test_dfa_exponent_equals_antropy(kind, n_samples):
    """antropy.detrended_fluctuation (nolds' box sizes 4 ... 10 % of the window, x 1.2)."""
    x = _windows(kind, n_samples)
    np.testing.assert_allclose(dfa_exponent(x), _each(antropy.detrended_fluctuation, x),
                               rtol=0, atol=1e-9)


def test_dfa_exponent_of_noise_and_of_a_random_walk():
    """Peng et al. 1994 (recalled): alpha = 0.5 for uncorrelated noise, 1.5 for its running
    sum (Brownian motion). Seen over 200 series of 1,024 samples: noise 0.528 (SD 0.030; DFA's
    smallest boxes of 4-10 samples bias it slightly upward), walk 1.487 (SD 0.050). Means
    over 32 seeded series (standard errors about 0.005 and 0.009), asserted within 0.06."""
    noise = np.random.default_rng(8).standard_normal((32, 1024))
    assert abs(np.mean(dfa_exponent(noise)) - 0.5) < 0.06
    assert abs(np.mean(dfa_exponent(np.cumsum(noise, axis=1))) - 1.5) < 0.06


def test_dfa_exponent_of_a_constant_is_nan():
    assert np.isnan(dfa_exponent(np.full((1, 512), 4.0))).all()


def test_non_finite_rows_give_nan_and_leave_others_alone():
    x = _windows("noise", 500)
    y = x.copy()
    y[1, 17] = np.nan
    for function in (approximate_entropy, sample_entropy, hurst_exponent, dfa_exponent):
        values = function(y)
        assert np.isnan(values[1])
        np.testing.assert_array_equal(np.delete(values, 1), np.delete(function(x), 1))


# --- registry entries -----------------------------------------------------------------------

ARRAY_FUNCTIONS = {"approximate_entropy": approximate_entropy, "sample_entropy": sample_entropy,
                   "hurst_exponent": hurst_exponent, "dfa_exponent": dfa_exponent}


def _batch():
    rng = np.random.default_rng(3)
    broadband = rng.standard_normal((3, 2, 256)) * 10.0
    sos = signal.butter(4, [8.0, 13.0], btype="bandpass", fs=SFREQ_HZ, output="sos")
    alpha = signal.sosfiltfilt(sos, broadband, axis=-1)
    return WindowBatch(broadband, sfreq_hz=SFREQ_HZ, ch_names=["Fz", "Pz"],
                       bands=[Band("alpha", 8.0, 13.0)], band_windows_uv={"alpha": alpha})


def test_feature_entries():
    """Four entries in the complexity family, signal features that may run on bands."""
    assert [f.name for f in FEATURES] == list(ARRAY_FUNCTIONS)
    for feature in FEATURES:
        assert feature.family == "complexity"
        assert not feature.per_band and feature.on_bands and feature.per_channel
        assert feature.description and "\n" not in feature.description
    units = {f.name: f.unit for f in FEATURES}
    assert units == {"approximate_entropy": "nat", "sample_entropy": "nat",
                     "hurst_exponent": "1", "dfa_exponent": "1"}
    defaults = {f.name: f.defaults for f in FEATURES}
    assert defaults["approximate_entropy"] == defaults["sample_entropy"] == {"m": 2, "r": 0.2}


@pytest.mark.parametrize("feature", FEATURES, ids=lambda f: f.name)
def test_feature_function_shape_and_values(feature):
    """(n_windows, n_channels), equal to the array function on the rows, broadband and on a
    band-filtered signal, with the entry's defaults."""
    batch = _batch()
    band = batch.bands[0]
    array_function = ARRAY_FUNCTIONS[feature.name]
    for which in (None, band):
        values = feature.function(batch, which, **feature.params())
        assert values.shape == (batch.n_windows, batch.n_channels)
        rows = batch.signal(which).reshape(-1, batch.n_samples)
        np.testing.assert_array_equal(values.ravel(), array_function(rows, **feature.params()))
        assert np.isfinite(values).all()


def test_entropy_parameters_reach_the_array_function():
    batch = _batch()
    feature = next(f for f in FEATURES if f.name == "sample_entropy")
    values = feature.function(batch, **feature.params({"m": 3, "r": 0.3}))
    np.testing.assert_array_equal(values.ravel(),
                                  sample_entropy(batch.broadband.reshape(6, 256), m=3, r=0.3))
    with pytest.raises(ValueError, match="no parameter"):
        feature.params({"order": 3})
