"""Robust location and spread: the statistics the channel checks compare channels with."""

from __future__ import annotations

import numpy as np

IQR_TO_SD = 0.7413
MAD_TO_SD = 1.4826


def quantile(values: np.ndarray, q, *, axis: int = -1) -> np.ndarray:
    """Sample quantile with the (k - 0.5) / n plotting positions (MATLAB's definition, which
    the PREP method uses); ``values`` must be free of NaN."""
    return np.quantile(values, q, axis=axis, method="hazen")


def iqr_sd(values: np.ndarray, *, axis: int = -1) -> np.ndarray:
    """Standard deviation estimated from the inter-quartile range."""
    upper, lower = quantile(values, [0.75, 0.25], axis=axis)
    return IQR_TO_SD * (upper - lower)


def mad_sd(values: np.ndarray, *, axis: int = -1) -> np.ndarray:
    """Standard deviation estimated from the median absolute deviation (``values`` free of
    NaN)."""
    centre = np.median(values, axis=axis, keepdims=True)
    return MAD_TO_SD * np.median(np.abs(values - centre), axis=axis)


def robust_z(values: np.ndarray, *, reference: np.ndarray, spread: str = "mad") -> np.ndarray:
    """z-scores of ``values`` against the median and spread of ``values[reference]``.

    ``spread`` is "mad" or "iqr". A zero spread gives z = 0 for values at the median and
    +/- inf elsewhere, so that one odd channel among identical ones still stands out.
    """
    values = np.asarray(values, dtype=float)
    pool = values[reference]
    pool = pool[np.isfinite(pool)]
    if pool.size == 0:
        return np.full(values.shape, np.nan)
    centre = np.median(pool)
    scale = iqr_sd(pool) if spread == "iqr" else mad_sd(pool)
    offset = values - centre
    with np.errstate(divide="ignore", invalid="ignore"):
        if scale > 0:
            return offset / scale
        return np.where(offset == 0, 0.0, np.sign(offset) * np.inf)
