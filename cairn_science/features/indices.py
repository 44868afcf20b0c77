"""Indices from the absolute band powers (µV², :meth:`WindowBatch.band_power`) of the study's
bands named ``theta``, ``alpha`` and ``beta`` (names matched case-insensitively; their edges
are the study's). A missing band is an error naming it.

Channel groups for the frontal/parietal ratio are read from 10-20/10-10 names (case-
insensitive), a prefix followed by "z" or a number and nothing else:

- frontal: ``Fp``, ``AF`` or ``F`` (Fp1, Fpz, AF3, AF7, Fz, F3, F8, F10…). FC and FT
  (fronto-central, fronto-temporal) are not frontal, they belong to the central and temporal
  rows.
- parietal: ``P`` (Pz, P3, P4, P7, P8…). PO (parieto-occipital), CP and TP are not.

10-5 names (AFF1h, PPO5h) and labels with prefixes or references ("EEG Fz", "Fz-A1") are in
neither group.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from .registry import Feature

if TYPE_CHECKING:
    from .batch import WindowBatch
    from .registry import Band

FRONTAL_PATTERN = re.compile(r"^(fp|af|f)(z|\d+)$", re.IGNORECASE)
PARIETAL_PATTERN = re.compile(r"^p(z|\d+)$", re.IGNORECASE)


def _band(batch, name):
    for band in batch.bands:
        if band.name.lower() == name:
            return band
    known = ", ".join(band.name for band in batch.bands) or "none"
    raise ValueError(f"this index needs a study band named {name!r}; the study's bands: "
                     f"{known}")


def _power(batch, name):
    band = _band(batch, name)
    return batch.band_power(band.l_freq_hz, band.h_freq_hz)


def frontal_channels(ch_names: Sequence[str]) -> list[int]:
    """Indices of the frontal channels in ``ch_names`` (see the module's docstring)."""
    return [i for i, name in enumerate(ch_names) if FRONTAL_PATTERN.match(name)]


def parietal_channels(ch_names: Sequence[str]) -> list[int]:
    """Indices of the parietal channels in ``ch_names`` (see the module's docstring)."""
    return [i for i, name in enumerate(ch_names) if PARIETAL_PATTERN.match(name)]


def engagement_index(batch: WindowBatch, band: Band | None = None) -> np.ndarray:
    """beta / (alpha + theta) per channel, from each channel's absolute band powers (Pope,
    Bogart & Bartolome 1995, who summed the powers over Cz, Pz, P3 and P4 first; from
    memory). NaN where alpha + theta is zero."""
    theta, alpha, beta = (_power(batch, name) for name in ("theta", "alpha", "beta"))
    with np.errstate(divide="ignore", invalid="ignore"):
        return beta / (alpha + theta)


def frontal_theta_parietal_alpha(batch: WindowBatch, band: Band | None = None) -> np.ndarray:
    """Mean theta power over the frontal channels divided by mean alpha power over the
    parietal channels, one value per window (the arithmetic means of absolute powers, µV²,
    so the ratio is unit-free). NaN when the batch has no frontal or no parietal channel,
    or the parietal alpha power is zero."""
    theta, alpha = _power(batch, "theta"), _power(batch, "alpha")
    frontal, parietal = frontal_channels(batch.ch_names), parietal_channels(batch.ch_names)
    if not frontal or not parietal:
        return np.full(batch.n_windows, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        return theta[:, frontal].mean(axis=-1) / alpha[:, parietal].mean(axis=-1)


FEATURES = [
    Feature("engagement_index", "index", engagement_index, "1",
            "beta / (alpha + theta) band power, per channel (Pope et al. 1995)."),
    Feature("frontal_theta_parietal_alpha", "index", frontal_theta_parietal_alpha, "1",
            "Mean frontal (Fp, AF, F; not FC, FT) theta power over mean parietal (P; not "
            "PO, CP, TP) alpha power.", per_channel=False),
]
