"""Signal preparation shared by the checks: drift removal, band limiting, windowed spectra."""

from __future__ import annotations

from dataclasses import dataclass

import mne
import numpy as np
from scipy import signal

LOWPASS_TRANSITION_HZ = 5.0


def highpass(data: np.ndarray, *, sfreq_hz: float, l_freq_hz: float) -> np.ndarray:
    """Zero-phase FIR high-pass with mne's default transition band (passband from
    ``l_freq_hz``), the drift removal PREP applies before its channel checks. A recording
    shorter than the filter is only demeaned."""
    if data.shape[-1] <= _filter_length(sfreq_hz=sfreq_hz,
                                        transition_hz=min(max(0.25 * l_freq_hz, 2.0), l_freq_hz)):
        return data - data.mean(axis=-1, keepdims=True)
    return mne.filter.filter_data(data, sfreq_hz, l_freq_hz, None, verbose=False)


def _filter_length(*, sfreq_hz, transition_hz):
    """Samples of mne's default FIR design (3.3 periods of the transition band)."""
    return int(np.ceil(3.3 * sfreq_hz / transition_hz))


def lowpass_applies(*, sfreq_hz: float, h_freq_hz: float, n_times: int | None = None) -> bool:
    """Whether :func:`lowpass` filters: its stopband fits below Nyquist and the recording is
    longer than the filter."""
    long_enough = n_times is None or n_times > _filter_length(
        sfreq_hz=sfreq_hz, transition_hz=LOWPASS_TRANSITION_HZ)
    return h_freq_hz + LOWPASS_TRANSITION_HZ < sfreq_hz / 2.0 and long_enough


def lowpass(data: np.ndarray, *, sfreq_hz: float, h_freq_hz: float) -> np.ndarray:
    """Zero-phase FIR low-pass, passband to ``h_freq_hz``, stopband from 5 Hz above (PREP's
    45/50 Hz band edge); ``data`` is returned unchanged when that does not fit below the
    Nyquist frequency."""
    if not lowpass_applies(sfreq_hz=sfreq_hz, h_freq_hz=h_freq_hz, n_times=data.shape[-1]):
        return data
    return mne.filter.filter_data(data, sfreq_hz, None, h_freq_hz,
                                  h_trans_bandwidth=LOWPASS_TRANSITION_HZ, verbose=False)


def windows_view(data: np.ndarray, *, window_samples: int) -> np.ndarray:
    """Whole non-overlapping windows as a view of shape (n_channels, n_windows, window)."""
    n_windows = data.shape[-1] // window_samples
    return data[..., : n_windows * window_samples].reshape(
        *data.shape[:-1], n_windows, window_samples
    )


def window_periodograms(data: np.ndarray, *, sfreq_hz: float, window_samples: int,
                        step_samples: int,
                        block_channels: int = 8) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Hann-windowed periodograms (one-sided power density, V**2/Hz) of every window.

    Returns ``(freqs_hz, starts, power)`` with power of shape (n_channels, n_windows, n_freqs);
    channels are transformed ``block_channels`` at a time to bound the memory used.
    """
    frames = np.lib.stride_tricks.sliding_window_view(data, window_samples, axis=-1)
    frames = frames[:, ::step_samples]
    starts = np.arange(frames.shape[1]) * step_samples
    taper = signal.windows.hann(window_samples, sym=False)
    freqs_hz = np.fft.rfftfreq(window_samples, d=1.0 / sfreq_hz)
    power = np.empty((data.shape[0], starts.size, freqs_hz.size))
    for first in range(0, data.shape[0], block_channels):
        block = frames[first : first + block_channels]
        spectrum = np.fft.rfft((block - block.mean(axis=-1, keepdims=True)) * taper, axis=-1)
        power[first : first + block_channels] = spectrum.real**2 + spectrum.imag**2
    power *= 2.0 / (sfreq_hz * np.sum(taper**2))
    power[..., 0] /= 2.0
    if window_samples % 2 == 0:
        power[..., -1] /= 2.0
    return freqs_hz, starts, power


@dataclass(frozen=True)
class Spectrum:
    """Welch power spectral density per channel (V**2/Hz), averaged over the good windows."""

    freqs_hz: np.ndarray
    power: np.ndarray
    n_windows: int


def welch_spectrum(data: np.ndarray, *, sfreq_hz: float, window_s: float,
                   keep_time: np.ndarray | None = None) -> Spectrum:
    """Welch PSD with Hann windows of ``window_s`` and half overlap.

    ``keep_time`` (bool per sample) leaves out every window that touches rejected time, so
    that artefacts do not bias the channel comparison; all windows are used when fewer than
    two would remain.
    """
    n_times = data.shape[-1]
    window_samples = int(min(round(window_s * sfreq_hz), n_times))
    step = max(1, window_samples // 2)
    freqs_hz, starts, power = window_periodograms(
        data, sfreq_hz=sfreq_hz, window_samples=window_samples, step_samples=step
    )
    use = np.ones(len(starts), dtype=bool)
    if keep_time is not None:
        bad = np.concatenate([[0], np.cumsum(~np.asarray(keep_time, dtype=bool))])
        use = (bad[starts + window_samples] - bad[starts]) == 0
        if use.sum() < 2:
            use[:] = True
    return Spectrum(freqs_hz=freqs_hz, power=power[:, use].mean(axis=1), n_windows=int(use.sum()))


def harmonics_hz(power_line_hz: float | None, *, nyquist_hz: float) -> np.ndarray:
    """Mains frequency and its harmonics below the Nyquist frequency."""
    if not power_line_hz:
        return np.array([])
    return np.arange(power_line_hz, nyquist_hz, power_line_hz)


def mains_mask(freqs_hz: np.ndarray, *, power_line_hz: float | None, band_hz: float,
               nyquist_hz: float) -> np.ndarray:
    """True for frequencies within ``band_hz`` of the mains frequency or a harmonic."""
    mask = np.zeros(freqs_hz.shape, dtype=bool)
    for centre_hz in harmonics_hz(power_line_hz, nyquist_hz=nyquist_hz):
        mask |= np.abs(freqs_hz - centre_hz) <= band_hz
    return mask
