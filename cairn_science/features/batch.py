"""Windows of one recording, as the feature functions see them.

Signals are held in microvolts, shape (n_windows, n_channels, n_samples). The broadband
windows are always there; band-filtered windows are present for the bands the request asks
time-domain features on. The Welch spectrum of the broadband windows is computed once and
shared by every spectral feature.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from functools import cached_property
from typing import TYPE_CHECKING

import numpy as np
from scipy import signal

if TYPE_CHECKING:
    from .registry import Band

DEFAULT_WELCH_SEGMENT_S = 2.0


class WindowBatch:
    def __init__(self, windows_uv: np.ndarray, *, sfreq_hz: float, ch_names: Sequence[str],
                 bands: Iterable[Band], band_windows_uv: Mapping[str, np.ndarray] | None = None,
                 welch_segment_s: float = DEFAULT_WELCH_SEGMENT_S):
        windows_uv = np.asarray(windows_uv, dtype=float)
        if windows_uv.ndim != 3:
            raise ValueError("windows must have shape (n_windows, n_channels, n_samples)")
        if windows_uv.shape[1] != len(ch_names):
            raise ValueError(f"{windows_uv.shape[1]} channels of data but {len(ch_names)} names")
        self.broadband = windows_uv
        self.sfreq_hz = float(sfreq_hz)
        self.ch_names = list(ch_names)
        self.bands = list(bands)
        self.band_windows = dict(band_windows_uv or {})
        self.welch_segment_s = float(welch_segment_s)

    @property
    def n_windows(self) -> int:
        return self.broadband.shape[0]

    @property
    def n_channels(self) -> int:
        return self.broadband.shape[1]

    @property
    def n_samples(self) -> int:
        return self.broadband.shape[2]

    def signal(self, band: Band | None = None) -> np.ndarray:
        """Windows of the broadband signal (``band`` None) or of one band-filtered signal."""
        if band is None:
            return self.broadband
        try:
            return self.band_windows[band.name]
        except KeyError:
            raise ValueError(f"no {band.name}-filtered signal was prepared for this batch") \
                from None

    @cached_property
    def welch(self) -> tuple[np.ndarray, np.ndarray]:
        """(freqs_hz, power) with power in µV²/Hz of shape (n_windows, n_channels, n_freqs):
        Hann segments of ``welch_segment_s`` (at most the window), half overlap, mean of the
        segments' periodograms, each segment's mean removed."""
        nperseg = int(min(self.n_samples, round(self.welch_segment_s * self.sfreq_hz)))
        freqs, power = signal.welch(self.broadband, fs=self.sfreq_hz, window="hann",
                                    nperseg=nperseg, noverlap=nperseg // 2, detrend="constant",
                                    scaling="density", axis=-1)
        return freqs, power

    def band_power(self, l_freq_hz: float, h_freq_hz: float) -> np.ndarray:
        """Power (µV²) between the edges, lower included and upper excluded: the PSD summed
        over those bins times the bin width."""
        freqs, power = self.welch
        mask = (freqs >= l_freq_hz) & (freqs < h_freq_hz)
        return power[..., mask].sum(axis=-1) * (freqs[1] - freqs[0])
