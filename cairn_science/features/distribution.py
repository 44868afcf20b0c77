"""Moments of the amplitude distribution of each broadband window (µV), over its samples.

Skewness and kurtosis are the biased sample estimates, as ``scipy.stats.skew`` and
``scipy.stats.kurtosis`` give them by default (bias=True; kurtosis with fisher=True): from the
central moments m_k = mean((x - mean(x))^k), skewness m3 / m2^1.5 and excess kurtosis
m4 / m2² - 3 (0 for a normal distribution). Like scipy, both are NaN where the window is
constant to rounding, m2 ≤ (eps · mean)² with eps the float64 machine epsilon (an
all-zero window included).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from .registry import Feature

if TYPE_CHECKING:
    from .batch import WindowBatch
    from .registry import Band


def _central_moments(x):
    mean = x.mean(axis=-1, keepdims=True)
    d = x - mean
    d2 = d * d
    m2 = d2.mean(axis=-1)
    m3 = (d2 * d).mean(axis=-1)
    m4 = (d2 * d2).mean(axis=-1)
    eps = np.finfo(x.dtype).eps
    constant = m2 <= (eps * mean[..., 0]) ** 2
    return m2, m3, m4, constant


def mean(batch: WindowBatch, band: Band | None = None) -> np.ndarray:
    """Mean of the window's samples (µV)."""
    return batch.signal(None).mean(axis=-1)


def standard_deviation(batch: WindowBatch, band: Band | None = None) -> np.ndarray:
    """Population standard deviation (ddof=0) of the window's samples (µV)."""
    return batch.signal(None).std(axis=-1, ddof=0)


def skewness(batch: WindowBatch, band: Band | None = None) -> np.ndarray:
    """Biased sample skewness m3 / m2^1.5 (scipy.stats.skew with bias=True)."""
    m2, m3, _, constant = _central_moments(batch.signal(None))
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(constant, np.nan, m3 / m2 ** 1.5)


def kurtosis(batch: WindowBatch, band: Band | None = None) -> np.ndarray:
    """Biased excess kurtosis m4 / m2² - 3 (scipy.stats.kurtosis with fisher=True,
    bias=True)."""
    m2, _, m4, constant = _central_moments(batch.signal(None))
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(constant, np.nan, m4 / m2 ** 2 - 3.0)


FEATURES = [
    Feature("mean", "distribution", mean, "µV", "Mean of the window's samples."),
    Feature("standard_deviation", "distribution", standard_deviation, "µV",
            "Population standard deviation (ddof=0) of the window's samples."),
    Feature("skewness", "distribution", skewness, "1",
            "Biased sample skewness m3/m2^1.5 (scipy.stats.skew, bias=True)."),
    Feature("kurtosis", "distribution", kurtosis, "1",
            "Biased excess (Fisher) kurtosis m4/m2² - 3 (scipy.stats.kurtosis, bias=True)."),
]
