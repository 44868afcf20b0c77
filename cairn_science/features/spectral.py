"""Spectral features, all from the one Welch spectrum of the broadband windows
(:attr:`WindowBatch.welch <cairn_science.features.batch.WindowBatch.welch>`: Hann segments of 2 s,
half overlap, each segment's mean removed, density scaling in µV²/Hz).

Band power is the PSD summed over the bins from the band's lower edge (included) to its
upper edge (excluded), times the bin width (:meth:`WindowBatch.band_power`). With the default
2 s segments the bins are 0.5 Hz apart, so a band 8–13 Hz takes the bins 8.0, 8.5, …, 12.5.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from .registry import Feature

if TYPE_CHECKING:
    from .batch import WindowBatch
    from .registry import Band

PAF_DEFAULT_RANGE_HZ = (7.0, 14.0)


def _require_band(name, band):
    if band is None:
        raise ValueError(f"feature {name!r} is computed per band; no band was given")
    return band


def _union_mask(freqs, bands):
    """Bins inside at least one of ``bands`` (lower edge included, upper excluded)."""
    mask = np.zeros(freqs.shape, dtype=bool)
    for band in bands:
        mask |= (freqs >= band.l_freq_hz) & (freqs < band.h_freq_hz)
    return mask


def absolute_power(batch: WindowBatch, band: Band | None = None) -> np.ndarray:
    """Power in ``band`` (µV²): the Welch PSD summed over [l_freq_hz, h_freq_hz) times the
    bin width."""
    band = _require_band("absolute_power", band)
    return batch.band_power(band.l_freq_hz, band.h_freq_hz)


def relative_power(batch: WindowBatch, band: Band | None = None) -> np.ndarray:
    """Power in ``band`` divided by the power over the union of the study's bands
    (``batch.bands``), not over the whole spectrum: a bin inside two overlapping bands
    counts once in the denominator, and bins outside every band (below the lowest band's
    lower edge, above the highest's upper edge, in gaps between bands) not at all. With
    contiguous non-overlapping bands the relative powers of the study's bands sum to 1.
    NaN where the denominator is zero (a flat channel)."""
    band = _require_band("relative_power", band)
    if not batch.bands:
        raise ValueError("relative_power needs the study's bands; the batch has none")
    freqs, power = batch.welch
    total = power[..., _union_mask(freqs, batch.bands)].sum(axis=-1) * (freqs[1] - freqs[0])
    with np.errstate(divide="ignore", invalid="ignore"):
        return batch.band_power(band.l_freq_hz, band.h_freq_hz) / total


def peak_alpha_frequency(batch: WindowBatch, band: Band | None = None, *,
                         l_freq_hz: float = PAF_DEFAULT_RANGE_HZ[0],
                         h_freq_hz: float = PAF_DEFAULT_RANGE_HZ[1],
                         interpolate: bool = True) -> np.ndarray:
    """Frequency (Hz) of the Welch PSD's largest bin in [l_freq_hz, h_freq_hz), by default
    7–14 Hz: the canonical alpha band 8–13 Hz widened by 1 Hz each side, a usual search
    range for the individual alpha peak (Klimesch 1999; Corcoran et al. 2018 search 7–13 Hz;
    both from memory).

    With ``interpolate`` the peak is refined by fitting a parabola through the largest bin
    and its two neighbours (taken from the whole spectrum, so a maximum on the range's edge
    still has both): the vertex ``f_k + df · (p[k-1] - p[k+1]) / (2 (p[k-1] - 2 p[k] +
    p[k+1]))``, its offset clipped to half a bin. The fit is on the power (not its log).
    There is no test that the maximum is a true peak: on a spectrum without an alpha peak
    (1/f) the result is the range's lower edge or near it. ``band`` is not used."""
    freqs, power = batch.welch
    df = freqs[1] - freqs[0]
    idx = np.flatnonzero((freqs >= l_freq_hz) & (freqs < h_freq_hz))
    if idx.size == 0:
        raise ValueError(f"peak_alpha_frequency: no spectral bin in [{l_freq_hz}, "
                         f"{h_freq_hz}) Hz at {df:g} Hz resolution")
    k = idx[np.argmax(power[..., idx], axis=-1)]  # (n_windows, n_channels), into freqs
    peak_hz = freqs[k]
    if not interpolate:
        return peak_hz
    left = np.take_along_axis(power, np.clip(k - 1, 0, freqs.size - 1)[..., None], -1)[..., 0]
    centre = np.take_along_axis(power, k[..., None], -1)[..., 0]
    right = np.take_along_axis(power, np.clip(k + 1, 0, freqs.size - 1)[..., None], -1)[..., 0]
    curvature = left - 2.0 * centre + right
    with np.errstate(divide="ignore", invalid="ignore"):
        offset = 0.5 * (left - right) / curvature
    has_neighbours = (k > 0) & (k < freqs.size - 1)
    offset = np.where(has_neighbours & (curvature < 0), np.clip(offset, -0.5, 0.5), 0.0)
    return peak_hz + offset * df


def spectral_entropy(batch: WindowBatch, band: Band | None = None) -> np.ndarray:
    """Normalised Shannon entropy of the Welch PSD (unit "1", 0 for all power in one bin, 1
    for a flat spectrum): with p_i the PSD of bin i divided by the sum over all bins from 0
    Hz (DC included) to Nyquist, ``-Σ p_i log2 p_i / log2(n_bins)``; bins with p_i = 0 add
    0. This is ``antropy.spectral_entropy(x, sfreq, method="welch", nperseg=<the batch's
    segment>, normalize=True)``: the same scipy Welch estimate (Hann, half overlap, mean
    removed) and the same base-2 logarithm, which the normalisation cancels. The entropy in
    bits is this value times log2(n_bins). NaN for a flat channel. ``band`` is not used."""
    _, power = batch.welch
    with np.errstate(divide="ignore", invalid="ignore"):
        p = power / power.sum(axis=-1, keepdims=True)
        terms = np.where(p > 0, p * np.log2(np.where(p > 0, p, 1.0)), 0.0)
        terms = np.where(np.isnan(p), np.nan, terms)
    return -terms.sum(axis=-1) / np.log2(power.shape[-1])


FEATURES = [
    Feature("absolute_power", "spectral", absolute_power, "µV²",
            "Band power from the Welch PSD, lower edge included, upper excluded.",
            per_band=True),
    Feature("relative_power", "spectral", relative_power, "1",
            "Band power divided by the power over the union of the study's bands.",
            per_band=True),
    Feature("peak_alpha_frequency", "spectral", peak_alpha_frequency, "Hz",
            "Frequency of the Welch PSD maximum in the alpha search range (7–14 Hz by "
            "default), refined by parabolic interpolation.",
            defaults={"l_freq_hz": PAF_DEFAULT_RANGE_HZ[0],
                      "h_freq_hz": PAF_DEFAULT_RANGE_HZ[1], "interpolate": True}),
    Feature("spectral_entropy", "spectral", spectral_entropy, "1",
            "Shannon entropy (base 2) of the normalised Welch PSD over 0 Hz to Nyquist, "
            "divided by log2 of the number of bins.")
]
