"""Complexity features: approximate and sample entropy, the Hurst exponent, the DFA exponent.

The array functions take ``x`` of shape (n_rows, n_samples), one window of one channel per
row, and return one float per row. Rows holding a non-finite value give nan.

Definitions follow the references the tests compare against:

* approximate entropy (Pincus 1991) and sample entropy (Richman & Moorman 2000) as antropy
  0.2.3 ``app_entropy`` / ``sample_entropy`` compute them: Chebyshev distance, tolerance
  ``r`` times the row's population SD (ddof=0);
* the Hurst exponent as mne-features 0.3.2 ``compute_hurst_exp``;
* the DFA exponent as antropy 0.2.3 ``detrended_fluctuation``.

The loops are numba kernels compiled on first use and cached on disk (``cache=True``); there
are three of them, each compiled for one signature only (float64 C arrays, int64 orders), so
a worker pays the compile once per installation (about 1.4 s in all) and a cache load
afterwards (a few ms each, after numba's own start-up of about 0.2 s on the first call of any
kernel in a process). The cache lives in ``__pycache__`` beside this file, or under
``NUMBA_CACHE_DIR`` when that is set (a read-only install needs it). Nothing here runs in
parallel.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from numba import njit

from .registry import Feature

# antropy's _linear_regression adds this to the slope's denominator; the DFA fit repeats it
# so that the exponent agrees with antropy's to rounding.
_DFA_BLOCK_VALUES = 1 << 16  # samples per block of rows: about 0.5 MB
_DFA_EPSILON = 1e-9


def _rows(x):
    x = np.ascontiguousarray(x, dtype=np.float64)
    if x.ndim != 2:
        raise ValueError("x must have shape (n_rows, n_samples)")
    return x, np.isfinite(x).all(axis=1)


def _check_entropy_params(m, r, n_samples):
    if int(m) != m or m < 1:
        raise ValueError(f"m must be a positive integer, got {m!r}")
    if not (r >= 0):
        raise ValueError(f"r must be >= 0, got {r!r}")
    if n_samples < m + 2:
        raise ValueError(f"{n_samples} samples are too few for embedding dimension {m}")
    return int(m), float(r)


def _order_and_tolerance(x, finite, n_templates, r):
    """Each row's template starts sorted by first coordinate, and its tolerance."""
    with np.errstate(invalid="ignore"):
        tolerance = r * x.std(axis=1)
    tolerance[~finite] = np.nan
    order = np.argsort(x[:, :n_templates], axis=1).astype(np.int64, copy=False)
    return np.ascontiguousarray(order), np.ascontiguousarray(tolerance, dtype=np.float64)


@njit(cache=True)
def _count_matches(v, n_templates, tol, counts_m, counts_m1):
    """The sorted-neighbour scan. ``v[k, p]`` is coordinate ``k`` of the ``p``-th template
    in order of first coordinate (``v[m]`` nan where a template has no (m + 1)-th
    coordinate). For each pair p < q within tolerance at length m (and at m + 1) adds 1 to
    both templates' counts when ``counts_m`` has a slot per template, and returns the numbers
    of such pairs. Only pairs whose first coordinates lie within tolerance are visited:
    ``hi`` is the first template beyond ``v[0, p] + tol``, which only moves forward."""
    m = v.shape[0] - 1
    first = v[0]
    last = v[m]
    per_template = counts_m.size > 0
    pairs_m = 0
    pairs_m1 = 0
    hi = 0
    for p in range(n_templates):
        if hi < p + 1:
            hi = p + 1
        while hi < n_templates and first[hi] - first[p] <= tol:
            hi += 1
        own_m = 0
        own_m1 = 0
        if m == 2:  # the default, kept branch-free so that the loop vectorises
            middle = v[1]
            a = middle[p]
            b = last[p]
            for q in range(p + 1, hi):
                match = abs(middle[q] - a) <= tol
                match_m1 = match & (abs(last[q] - b) <= tol)
                own_m += match
                own_m1 += match_m1
                if per_template:
                    counts_m[q] += match
                    counts_m1[q] += match_m1
        else:
            for q in range(p + 1, hi):
                distance = 0.0
                for k in range(1, m):
                    distance = max(distance, abs(v[k, q] - v[k, p]))
                match = distance <= tol
                match_m1 = match & (abs(last[q] - last[p]) <= tol)
                own_m += match
                own_m1 += match_m1
                if per_template:
                    counts_m[q] += match
                    counts_m1[q] += match_m1
        if per_template:
            counts_m[p] += own_m
            counts_m1[p] += own_m1
        pairs_m += own_m
        pairs_m1 += own_m1
    return pairs_m, pairs_m1


@njit(cache=True)
def _entropy_kernel(x, order, m, tolerance, approximate):
    """ApEn (``approximate``) or SampEn of each row; ``order`` holds each row's template
    starts sorted by first coordinate (n - m + 1 of them for ApEn, n - m for SampEn)."""
    n_rows, n = x.shape
    n_templates = order.shape[1]
    n_m1 = n - m  # templates of length m + 1
    out = np.empty(n_rows)
    v = np.empty((m + 1, n_templates))
    counts_m = np.empty(n_templates if approximate else 0, dtype=np.int64)
    counts_m1 = np.empty(n_templates if approximate else 0, dtype=np.int64)
    for row in range(n_rows):
        tol = tolerance[row]
        if not tol >= 0.0:
            out[row] = np.nan
            continue
        for p in range(n_templates):
            start = order[row, p]
            for k in range(m):
                v[k, p] = x[row, start + k]
            # the one ApEn template with no (m + 1)-th coordinate never matches at m + 1
            v[m, p] = x[row, start + m] if start < n_m1 else np.nan
        if approximate:
            for p in range(n_templates):
                counts_m[p] = 1  # the self-match, which ApEn's definition counts
                counts_m1[p] = 1 if order[row, p] < n_m1 else 0
        pairs_m, pairs_m1 = _count_matches(v, n_templates, tol, counts_m, counts_m1)
        if approximate:
            phi_m = 0.0  # means of log(count / n), as the definition (and antropy) has it
            phi_m1 = 0.0
            for p in range(n_templates):
                phi_m += math.log(counts_m[p] / n_templates)
                if counts_m1[p] > 0:
                    phi_m1 += math.log(counts_m1[p] / n_m1)
            out[row] = phi_m / n_templates - phi_m1 / n_m1
        elif pairs_m == 0:
            out[row] = np.nan
        elif pairs_m1 == 0:
            out[row] = np.inf
        else:
            out[row] = -math.log(pairs_m1 / pairs_m)
    return out


def approximate_entropy(x: np.ndarray, m: int = 2, r: float = 0.2) -> np.ndarray:
    """Approximate entropy (Pincus 1991) of each row, in nats.

    ``phi(k)`` is the mean over the row's ``n - k + 1`` templates of length ``k`` of the log
    share of templates within tolerance of it, self-match included; ApEn is
    ``phi(m) - phi(m + 1)``. Tolerance: ``r`` times the row's population SD (ddof=0);
    templates match at Chebyshev distance <= tolerance. This is antropy's ``app_entropy``;
    mne-features' ``compute_app_entropy`` is the same with the SD taken with ddof=1.

    Algorithm: the templates are sorted by their first coordinate, and each is compared only
    with the following templates whose first coordinate lies within tolerance of its own
    (the scan stops at the first one beyond); every match counts for both templates. This
    visits a fraction of the pairs instead of all of them. A constant row gives 0.
    """
    x, finite = _rows(x)
    m, r = _check_entropy_params(m, r, x.shape[1])
    order, tolerance = _order_and_tolerance(x, finite, x.shape[1] - m + 1, r)
    return _entropy_kernel(x, order, m, tolerance, True)


def sample_entropy(x: np.ndarray, m: int = 2, r: float = 0.2) -> np.ndarray:
    """Sample entropy (Richman & Moorman 2000) of each row, in nats.

    ``-log(A / B)``, with ``B`` the number of pairs of distinct templates of length ``m`` and
    ``A`` of length ``m + 1`` within tolerance of each other, both counted over the first
    ``n - m`` template starts (self-matches excluded). Tolerance: ``r`` times the row's
    population SD (ddof=0), match at Chebyshev distance <= tolerance, found with the same
    sorted-neighbour scan as :func:`approximate_entropy`. A constant row gives 0.

    As antropy's ``sample_entropy``: nan when no pair matches at length ``m`` (undefined),
    inf when pairs match at length ``m`` but none at ``m + 1``. antropy's numba path (under
    5000 samples) counts a match at distance strictly below tolerance; a distance exactly
    equal to the tolerance, which real-valued data almost never gives, is where the two
    can differ (antropy's KDTree path and mne-features use <= as here).
    """
    x, finite = _rows(x)
    m, r = _check_entropy_params(m, r, x.shape[1])
    order, tolerance = _order_and_tolerance(x, finite, x.shape[1] - m, r)
    return _entropy_kernel(x, order, m, tolerance, False)


@njit(cache=True)
def _hurst_kernel(x, splits):
    """log of the mean rescaled range for each row and sub-series length, as mne-features
    builds it: for each prefix of each chunk, the range of the chunk's cumulative deviation
    from the chunk mean over that prefix, divided by the prefix's SD (ddof=1); prefixes of
    SD 0 are left out."""
    n_rows, n = x.shape
    out = np.empty((n_rows, splits.size))
    for row in range(n_rows):
        for j in range(splits.size):
            size = splits[j]
            total = 0.0
            count = 0
            for chunk in range(n // size):
                offset = chunk * size
                chunk_mean = 0.0
                for k in range(size):
                    chunk_mean += x[row, offset + k]
                chunk_mean /= size
                first = x[row, offset]
                z = first - chunk_mean
                z_max = z
                z_min = z
                mean = first
                m2 = 0.0
                for k in range(1, size):
                    value = x[row, offset + k]
                    z += value - chunk_mean
                    if z > z_max:
                        z_max = z
                    if z < z_min:
                        z_min = z
                    delta = value - mean  # Welford's running mean and sum of squares
                    mean += delta / (k + 1)
                    m2 += delta * (value - mean)
                    if m2 > 0.0:
                        total += (z_max - z_min) / math.sqrt(m2 / k)
                        count += 1
            out[row, j] = math.log(total / count) if count > 0 else np.nan
    return out


@lru_cache(maxsize=32)
def _hurst_splits(n_samples):
    """mne-features' sub-series lengths (about 20, log-spaced from 16 to n/2) and, for each,
    log of the Anis-Lloyd/Peters expected R/S less log(n)/2, which it subtracts."""
    splits = np.unique(np.floor(np.logspace(4, np.log2(n_samples / 2), num=20, base=2.0)))
    splits = splits.astype(np.int64)
    correction = np.empty(splits.size)
    for j, n in enumerate(splits.tolist()):
        s = sum(math.sqrt((n - i) / i) for i in range(1, n)) * ((n - 0.5) / n)
        if n <= 340:
            expected = math.gamma((n - 1) / 2.0) / (math.sqrt(math.pi) * math.gamma(n / 2.0)) * s
        else:
            expected = ((n - 0.5) / n) * (1.0 / math.sqrt(math.pi * n / 2.0)) * s
        correction[j] = math.log(expected) - math.log(n) / 2
    return splits, correction


def _slopes(x, y):
    """Least-squares slope of each row of ``y`` against ``x`` (1-D), nan rows give nan."""
    k = x.size
    sx, sx2 = x.sum(), (x * x).sum()
    return (k * (y @ x) - sx * y.sum(axis=1)) / (k * sx2 - sx * sx)


def hurst_exponent(x: np.ndarray) -> np.ndarray:
    """Rescaled-range Hurst exponent of each row, as mne-features' ``compute_hurst_exp``.

    For each of about 20 sub-series lengths ``n`` (log-spaced from 16 to half the row), the
    row is cut into ``n_samples // n`` chunks; every prefix of every chunk gives one R/S (see
    ``_hurst_kernel``); the log of their mean, less the log of the Anis-Lloyd/Peters expected
    R/S for white noise plus log(n)/2, is regressed on log(n) and the slope returned.
    Dimensionless. A constant row gives nan (every SD is 0). mne-features takes each
    prefix's SD in two passes and may leave a rounding residue where a prefix is constant;
    the running (Welford) SD here gives 0 and leaves such a prefix out.
    """
    x, finite = _rows(x)
    splits, correction = _hurst_splits(x.shape[1])
    log_rs = _hurst_kernel(x, splits)
    hurst = _slopes(np.log(splits), log_rs - correction)
    hurst[~finite] = np.nan
    return hurst


@lru_cache(maxsize=32)
def _dfa_sizes(n_samples):
    """antropy's (nolds') box sizes: 4, then floor(4 * 1.2**i) up to 10 % of the row."""
    max_n = 0.1 * n_samples
    max_i = int(math.floor(math.log(max_n / 4) / math.log(1.2)))
    sizes = [4]
    for i in range(max_i + 1):
        size = int(math.floor(4 * 1.2**i))
        if size > sizes[-1]:
            sizes.append(size)
    return np.array(sizes, dtype=np.int64)


def dfa_exponent(x: np.ndarray) -> np.ndarray:
    """Detrended fluctuation exponent of each row, as antropy's ``detrended_fluctuation``.

    The profile (cumulative sum of the row less its mean) is cut into non-overlapping boxes of
    each size ``n`` (4, then geometric steps of 1.2 up to 10 % of the row, the remainder at
    the end dropped); in each box the least-squares line is removed, and ``F(n)`` is the
    square root of the mean over boxes of the mean squared residual. The exponent is the
    slope of log F(n) on log n over the sizes with F(n) > 0. Dimensionless. nan for a
    constant row and when fewer than two sizes are usable (under 58 samples; antropy returns
    0 there, the slope of a single point through its regularised fit). Vectorised over rows
    in numpy: no loop needs numba.
    """
    x, finite = _rows(x)
    n_rows, n_samples = x.shape
    sizes = _dfa_sizes(n_samples) if n_samples >= 4 else np.zeros(0, dtype=np.int64)
    fluctuation = np.empty((n_rows, sizes.size))
    # a block of rows at a time, so that the profile and each size's boxes and residuals
    # stay in the processor's cache (the arithmetic is the same row by row)
    step = max(1, _DFA_BLOCK_VALUES // max(n_samples, 1))
    lines = [(n, np.arange(n, dtype=np.float64)) for n in sizes.tolist()]
    for first in range(0, n_rows, step):
        rows = x[first:first + step]
        walk = np.cumsum(rows - rows.mean(axis=1, keepdims=True), axis=1)
        for j, (n, t) in enumerate(lines):
            boxes = walk[:, : n_samples - n_samples % n].reshape(rows.shape[0],
                                                                 n_samples // n, n)
            sx, sx2 = t.sum(), (t * t).sum()
            sy = boxes.sum(axis=2)
            slope = (n * (boxes @ t) - sx * sy) / (n * sx2 - sx * sx + _DFA_EPSILON)
            intercept = sy / n - slope * (sx / n)
            residual = boxes - (intercept[..., None] + slope[..., None] * t)
            fluctuation[first:first + rows.shape[0], j] = np.sqrt(
                np.mean(np.einsum("rbi,rbi->rb", residual, residual) / n, axis=1))
    used = fluctuation > 0
    log_n = np.log(sizes.astype(np.float64))
    log_f = np.log(np.where(used, fluctuation, 1.0))
    k = used.sum(axis=1)
    sx = (used * log_n).sum(axis=1)
    sx2 = (used * log_n**2).sum(axis=1)
    sy = (used * log_f).sum(axis=1)
    sxy = (used * log_n * log_f).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        dfa = (k * sxy - sx * sy) / (k * sx2 - sx * sx + _DFA_EPSILON)
    dfa[(k < 2) | ~finite | (np.ptp(x, axis=1) == 0)] = np.nan
    return dfa


def _on_windows(array_function):
    def function(batch, band=None, **params):
        signal = batch.signal(band)
        n_windows, n_channels, n_samples = signal.shape
        values = array_function(signal.reshape(n_windows * n_channels, n_samples), **params)
        return values.reshape(n_windows, n_channels)

    function.__name__ = array_function.__name__
    function.__doc__ = f"{array_function.__name__} of each window and channel: " \
                       "(n_windows, n_channels)."
    return function


FEATURES = [
    Feature("approximate_entropy", "complexity", _on_windows(approximate_entropy), "nat",
            "Approximate entropy (Pincus): regularity of the signal, Chebyshev tolerance "
            "r x SD.", defaults={"m": 2, "r": 0.2}, on_bands=True),
    Feature("sample_entropy", "complexity", _on_windows(sample_entropy), "nat",
            "Sample entropy (Richman & Moorman): -log of the share of m-matches that stay "
            "matched at m + 1.", defaults={"m": 2, "r": 0.2}, on_bands=True),
    Feature("hurst_exponent", "complexity", _on_windows(hurst_exponent), "1",
            "Hurst exponent by rescaled range (Anis-Lloyd/Peters corrected), as "
            "mne-features.", on_bands=True),
    Feature("dfa_exponent", "complexity", _on_windows(dfa_exponent), "1",
            "Detrended fluctuation analysis scaling exponent (Peng et al.), as antropy.",
            on_bands=True),
]
