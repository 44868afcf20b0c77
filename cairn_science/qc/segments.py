"""Bad segments (windows rejected across channels) and blink counting."""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy import signal

from . import robust
from .signals import lowpass, mains_mask, window_periodograms

SEGMENT_WORDS = {
    "amplitude": "very large amplitude",
    "muscle": "muscle activity",
    "no_signal": "no signal on many channels",
    "jump": "sudden jump on many channels at once (a break in the recording or a reset)",
}
FRONTAL = re.compile(r"^(fp|af)", re.IGNORECASE)
BLINK_BAND_HZ = 10.0
BLINK_MIN_GAP_S = 0.25
BLINK_WIDTH_S = (0.03, 1.0)
MUSCLE_MIN_BAND_HZ = 5.0


@dataclass(frozen=True)
class WindowFlags:
    """Per-channel, per-window conditions of the segment check (channels x windows).

    ``muscle`` is None when the muscle band does not fit below the Nyquist frequency or the
    recording holds fewer than two windows.
    """

    starts: np.ndarray
    stops: np.ndarray
    amplitude: np.ndarray
    muscle: np.ndarray | None
    no_signal: np.ndarray
    muscle_note: str | None = None


@dataclass(frozen=True)
class Segment:
    """One rejected interval and, in words, why."""

    onset_s: float
    duration_s: float
    reasons: list


def window_flags(data: np.ndarray, *, sfreq_hz: float, no_signal: np.ndarray, window_s: float = 1.0,
                 peak_to_peak_v: float = 250e-6, muscle_l_freq_hz: float = 30.0,
                 muscle_h_freq_hz: float = 100.0, muscle_z_max: float = 5.0,
                 power_line_hz: float | None = None,
                 mains_band_hz: float = 1.0) -> WindowFlags:
    """Which channels show, in which windows, an extreme peak-to-peak amplitude, a burst of
    muscle-band power (robust z over the channel's own windows) or mostly no signal.

    Windows are consecutive, ``window_s`` long; a last partial window is kept.
    """
    n_times = data.shape[1]
    window_samples = max(1, int(round(window_s * sfreq_hz)))
    starts = np.arange(0, n_times, window_samples)
    stops = np.minimum(starts + window_samples, n_times)
    filled = np.nan_to_num(data, nan=0.0)
    peak_to_peak = np.maximum.reduceat(filled, starts, axis=1) - np.minimum.reduceat(
        filled, starts, axis=1
    )
    amplitude = peak_to_peak > peak_to_peak_v
    silent = np.add.reduceat(no_signal.astype(np.int32), starts, axis=1) >= 0.5 * (stops - starts)

    nyquist_hz = sfreq_hz / 2.0
    h_freq_hz = min(muscle_h_freq_hz, 0.95 * nyquist_hz)
    muscle = None
    note = None
    if h_freq_hz - muscle_l_freq_hz < MUSCLE_MIN_BAND_HZ or n_times < 2 * window_samples:
        note = (f"muscle bursts not checked: the {muscle_l_freq_hz:g}-{muscle_h_freq_hz:g} Hz "
                f"band does not fit at {sfreq_hz:g} Hz sampling or the recording is too short")
    else:
        freqs_hz, _, power = window_periodograms(
            filled, sfreq_hz=sfreq_hz, window_samples=window_samples,
            step_samples=window_samples,
        )
        band = (freqs_hz >= muscle_l_freq_hz) & (freqs_hz <= h_freq_hz)
        band &= ~mains_mask(freqs_hz, power_line_hz=power_line_hz, band_hz=mains_band_hz,
                            nyquist_hz=nyquist_hz + mains_band_hz)
        log_power = np.log(power[..., band].sum(axis=-1) + 1e-40)
        centre = np.median(log_power, axis=1, keepdims=True)
        spread = robust.mad_sd(log_power, axis=1)[:, None]
        with np.errstate(divide="ignore", invalid="ignore"):
            z = (log_power - centre) / spread
        muscle = np.zeros(amplitude.shape, dtype=bool)
        muscle[:, : z.shape[1]] = np.nan_to_num(z, nan=0.0) > muscle_z_max
    return WindowFlags(starts=starts, stops=stops, amplitude=amplitude, muscle=muscle,
                       no_signal=silent, muscle_note=note)


def reject_windows(flags: WindowFlags, *, channels: np.ndarray,
                   channel_share: float = 0.25) -> dict[str, np.ndarray]:
    """Per window, the reasons (keys of SEGMENT_WORDS) that hold on at least
    ``channel_share`` of ``channels`` (bool per channel, at least one channel needed)."""
    n_windows = flags.starts.size
    needed = max(1, int(np.ceil(channel_share * channels.sum())))
    reasons = {}
    if not channels.any():
        return {key: np.zeros(n_windows, dtype=bool) for key in SEGMENT_WORDS}
    for key, table in (("amplitude", flags.amplitude), ("muscle", flags.muscle),
                       ("no_signal", flags.no_signal)):
        if table is None:
            reasons[key] = np.zeros(n_windows, dtype=bool)
        else:
            reasons[key] = table[channels].sum(axis=0) >= needed
    return reasons


def merge_segments(reasons: Mapping[str, np.ndarray], *, starts: np.ndarray, stops: np.ndarray,
                   sfreq_hz: float) -> list[Segment]:
    """Consecutive rejected windows merged into :class:`Segment` intervals."""
    rejected = np.zeros(starts.size, dtype=bool)
    for table in reasons.values():
        rejected |= table
    segments = []
    index = 0
    while index < starts.size:
        if not rejected[index]:
            index += 1
            continue
        end = index
        while end + 1 < starts.size and rejected[end + 1]:
            end += 1
        words = [SEGMENT_WORDS[key] for key, table in reasons.items()
                 if table[index : end + 1].any()]
        onset_s = starts[index] / sfreq_hz
        segments.append(Segment(onset_s=float(onset_s),
                                duration_s=float(stops[end] / sfreq_hz - onset_s),
                                reasons=words))
        index = end + 1
    return segments


def jump_segments(onsets_s: Iterable[float], *, margin_s: float, duration_s: float,
                  rejected: Iterable[Segment] = ()) -> list[Segment]:
    """Rejected intervals of ``margin_s`` on each side of each jump that most channels make
    together (clipped to the recording), except jumps already inside ``rejected`` segments."""
    segments = []
    for onset_s in onsets_s:
        if any(s.onset_s <= onset_s < s.onset_s + s.duration_s for s in rejected):
            continue
        start_s = max(0.0, float(onset_s) - margin_s)
        stop_s = min(duration_s, float(onset_s) + margin_s)
        segments.append(Segment(onset_s=start_s, duration_s=stop_s - start_s,
                                reasons=[SEGMENT_WORDS["jump"]]))
    return segments


def combine_segments(*lists: Iterable[Segment]) -> list[Segment]:
    """One list of segments in time order, overlapping or touching ones merged with the
    union of their reasons."""
    merged = []
    for segment in sorted((s for items in lists for s in items), key=lambda s: s.onset_s):
        last = merged[-1] if merged else None
        if last is not None and segment.onset_s <= last.onset_s + last.duration_s + 1e-9:
            stop_s = max(last.onset_s + last.duration_s, segment.onset_s + segment.duration_s)
            reasons = last.reasons + [r for r in segment.reasons if r not in last.reasons]
            merged[-1] = Segment(onset_s=last.onset_s, duration_s=stop_s - last.onset_s,
                                 reasons=reasons)
        else:
            merged.append(segment)
    return merged


def keep_mask(segments: Iterable[Segment], *, n_times: int, sfreq_hz: float) -> np.ndarray:
    """Samples outside every segment."""
    keep = np.ones(n_times, dtype=bool)
    for segment in segments:
        start = int(round(segment.onset_s * sfreq_hz))
        stop = int(round((segment.onset_s + segment.duration_s) * sfreq_hz))
        keep[start:stop] = False
    return keep


@dataclass(frozen=True)
class Blinks:
    """Blinks found on the frontal channels (information only; never a rejection)."""

    count: int
    per_minute: float | None
    channels: list
    onsets_s: list


def count_blinks(data: np.ndarray, *, sfreq_hz: float, ch_names: Sequence[str], usable: np.ndarray,
                 keep_time: np.ndarray | None = None, min_amplitude_v: float = 40e-6,
                 z_min: float = 5.0) -> Blinks:
    """Count blinks: positive peaks of the mean frontal (Fp*, AF*) signal below 10 Hz that
    exceed both ``min_amplitude_v`` and ``z_min`` robust standard deviations.

    ``data`` should be high-passed (about 1 Hz). Only peaks in kept time count; the rate is
    per minute of kept time. Without a usable frontal channel nothing is counted.
    """
    frontal = [i for i, name in enumerate(ch_names) if FRONTAL.match(name) and usable[i]]
    if not frontal:
        return Blinks(count=0, per_minute=None, channels=[], onsets_s=[])
    trace = lowpass(data[frontal].mean(axis=0), sfreq_hz=sfreq_hz, h_freq_hz=BLINK_BAND_HZ)
    kept = np.ones(trace.size, dtype=bool) if keep_time is None else keep_time
    if not kept.any():
        return Blinks(count=0, per_minute=None, channels=[ch_names[i] for i in frontal],
                      onsets_s=[])
    height = max(min_amplitude_v, z_min * float(robust.mad_sd(trace[kept])))
    peaks, _ = signal.find_peaks(
        trace,
        height=height,
        distance=max(1, int(BLINK_MIN_GAP_S * sfreq_hz)),
        width=(BLINK_WIDTH_S[0] * sfreq_hz, BLINK_WIDTH_S[1] * sfreq_hz),
    )
    peaks = peaks[kept[peaks]]
    minutes = kept.sum() / sfreq_hz / 60.0
    return Blinks(
        count=int(peaks.size),
        per_minute=float(peaks.size / minutes) if minutes > 0 else None,
        channels=[ch_names[i] for i in frontal],
        onsets_s=[float(p / sfreq_hz) for p in peaks],
    )
