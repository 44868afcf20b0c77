"""Time-domain features of the signal itself. Each may run on the broadband windows (``band``
None) or on one band-filtered signal (``batch.signal(band)``); all work on the whole
(n_windows, n_channels, n_samples) array at once and reduce over the last axis.
"""

from __future__ import annotations

import numpy as np

from .registry import Feature


def line_length(batch, band=None) -> np.ndarray:
    """Mean absolute difference of consecutive samples (µV per sample):
    ``mean(|x[n+1] - x[n]|)`` over the window's n_samples - 1 differences. This is
    mne_features' ``compute_line_length`` (the mean, not Esteller's sum; the sum is this value
    times n_samples - 1)."""
    x = batch.signal(band)
    return np.abs(np.diff(x, axis=-1)).mean(axis=-1)


def teager_kaiser_energy(batch, band=None) -> np.ndarray:
    """Mean Teager–Kaiser energy (µV²): ``mean(x[n]² - x[n-1] x[n+1])`` over n = 1 …
    n_samples - 2, the interior samples. For A·sin(ωn + φ) every term is A² sin²(ω).
    mne_features' ``compute_teager_kaiser_energy`` applies the same operator, not to the
    signal but to each level of a db4 wavelet decomposition (its "mean" outputs are this
    function on those coefficient sequences)."""
    x = batch.signal(band)
    return (x[..., 1:-1] ** 2 - x[..., :-2] * x[..., 2:]).mean(axis=-1)


def peak_count(batch, band=None) -> np.ndarray:
    """Number of strict local maxima in the window: samples n (1 ≤ n ≤ n_samples - 2) with
    ``x[n-1] < x[n] > x[n+1]``. The first and last samples never count, and a flat top (two
    or more equal samples) does not count. A count per window, so it scales with the window
    length."""
    x = batch.signal(band)
    middle = x[..., 1:-1]
    return ((middle > x[..., :-2]) & (middle > x[..., 2:])).sum(axis=-1).astype(float)


def zero_crossings(batch, band=None, *, remove_mean: bool = True) -> np.ndarray:
    """Number of sign changes between consecutive samples, the sign taken with
    ``numpy.signbit`` (a sample exactly 0 counts as positive), as ``antropy.num_zerocross``
    (with normalize=False) counts them. By default the window's mean is removed first, per
    channel, so that a DC offset of the broadband signal does not hide the crossings; with
    ``remove_mean=False`` the raw signal is counted, which is antropy's function itself."""
    x = batch.signal(band)
    if remove_mean:
        x = x - x.mean(axis=-1, keepdims=True)
    return np.diff(np.signbit(x), axis=-1).sum(axis=-1).astype(float)


_HJORTH_BLOCK_VALUES = 1 << 16  # rows per block: about 0.5 MB of samples, kept in cache


def _variance(v):
    """Population variance of each row of a 2-D block."""
    centred = v - v.mean(axis=-1, keepdims=True)
    return np.einsum("ij,ij->i", centred, centred) / v.shape[-1]


def _hjorth(x):
    """(mobility, complexity) of every row, as ``antropy.hjorth_params`` (ddof=0): the same
    differences and variances, computed a block of rows at a time so that each block's
    differences stay in the processor's cache instead of making three passes over memory."""
    x = np.asarray(x, dtype=float)
    shape, n = x.shape[:-1], x.shape[-1]
    rows = x.reshape(-1, n)
    variances = np.empty((3, rows.shape[0]))
    step = max(1, _HJORTH_BLOCK_VALUES // max(n, 1))
    for start in range(0, rows.shape[0], step):
        block = rows[start:start + step]
        dx = np.diff(block, axis=-1)
        ddx = np.diff(dx, axis=-1)
        stop = start + block.shape[0]
        variances[0, start:stop] = _variance(block)
        variances[1, start:stop] = _variance(dx)
        variances[2, start:stop] = _variance(ddx)
    x_var, dx_var, ddx_var = (v.reshape(shape) for v in variances)
    with np.errstate(divide="ignore", invalid="ignore"):
        mobility = np.sqrt(dx_var / x_var)
        complexity = np.sqrt(ddx_var / dx_var) / mobility
    return mobility, complexity


def _hjorth_of(batch, band):
    """Mobility and complexity of a batch's signal, computed once for both features (kept
    on the batch, keyed by band)."""
    memo = vars(batch).setdefault("_hjorth_memo", {})
    key = None if band is None else band.name
    if key not in memo:
        memo[key] = _hjorth(batch.signal(band))
    return memo[key]


def hjorth_mobility(batch, band=None) -> np.ndarray:
    """Hjorth mobility ``sqrt(var(x') / var(x))`` with x' the first difference and var the
    population variance (ddof=0): per sample (radians per sample for a sine, ≈ ω), so
    unit "1"; times the sampling rate it is in s⁻¹. ``antropy.hjorth_params(x)`` (without
    ``sf``) returns the same. NaN for a flat channel. Computed with the complexity, once."""
    return _hjorth_of(batch, band)[0]


def hjorth_complexity(batch, band=None) -> np.ndarray:
    """Hjorth complexity: the mobility of the first difference divided by the mobility of
    the signal, ``sqrt(var(x'') / var(x')) / sqrt(var(x') / var(x))`` (ddof=0), as
    ``antropy.hjorth_params`` computes it; ≈ 1 for a sine. NaN for a flat channel."""
    return _hjorth_of(batch, band)[1]


FEATURES = [
    Feature("line_length", "time", line_length, "µV",
            "Mean absolute difference of consecutive samples.", on_bands=True),
    Feature("teager_kaiser_energy", "time", teager_kaiser_energy, "µV²",
            "Mean of x[n]² - x[n-1]·x[n+1] over the window's interior samples.",
            on_bands=True),
    Feature("peak_count", "time", peak_count, "1",
            "Number of strict local maxima (x[n-1] < x[n] > x[n+1]) in the window.",
            on_bands=True),
    Feature("zero_crossings", "time", zero_crossings, "1",
            "Number of sign changes between consecutive samples, of the mean-removed "
            "window by default.", defaults={"remove_mean": True}, on_bands=True),
    Feature("hjorth_mobility", "time", hjorth_mobility, "1",
            "Hjorth mobility, sqrt(var(x')/var(x)), per sample.", on_bands=True),
    Feature("hjorth_complexity", "time", hjorth_complexity, "1",
            "Hjorth complexity, mobility of x' divided by mobility of x.", on_bands=True),
]
