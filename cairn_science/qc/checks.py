"""Per-channel quality checks, each a pure function over arrays (volts, channels x times).

Every check returns a :class:`ChannelCheck`: one metric value per channel, the threshold it
was compared with and the resulting flags. ``reference`` (bool per channel) names the
channels whose values define "the others" in the robust comparisons; a channel outside it
(marked bad by the site, or without signal) is still assessed, but does not shift the
statistics the others are judged by.

Which criteria follow the published PREP definitions: deviation (robust z of the IQR-based
amplitude), high-frequency noise (ratio of the amplitude above 50 Hz to the amplitude below,
robust z; here from the Welch spectrum with mains bands left out), correlation (98th
percentile of the absolute correlations in windows) and predictability (median prediction
by spherical splines from random channel subsets, correlation in 5 s windows). The PREP flat
and dropout criteria are widened here into one "no signal" share of time; sudden jumps,
mains and bridging are ours. Where our defaults differ from PREP's (QCSettings says which), passing
PREP's values gives PREP's decisions.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from . import robust
from .positions import spline_interpolation_matrix
from .signals import harmonics_hz, mains_mask, windows_view

WORDS = {
    "marked_by_site": "marked by site",
    "dropout": "no signal",
    "deviation": "amplitude far from the others",
    "amplitude_factor": "amplitude over {limit:g} times the others'",
    "amplitude_factor_low": "amplitude under 1/{limit:g} of the others'",
    "high_frequency": "much high-frequency noise",
    "correlation": "does not follow the other channels",
    "jumps": "sudden jumps in the signal",
    "mains": "strong mains hum",
    "bridging": "nearly identical to {partner}",
    "predictability": "cannot be predicted from its neighbours",
}


#: What each check measures, with its unit, and which side of its threshold is bad (the
#: comparison the check makes below), in words for the quality pages; ``{t}`` is the
#: threshold a channel was compared with.
MEASURES = {
    "dropout": ("share of time without signal (0–1)", "above {t} is bad"),
    "deviation": ("amplitude against the other channels (robust z, in SDs)",
                  "beyond ±{t} is bad"),
    "amplitude_factor": ("broadband amplitude against the other channels (times)",
                         "{t} times or more is bad"),
    "amplitude_factor_low": ("broadband amplitude against the other channels (times)",
                             "{t} times or less is bad"),
    "high_frequency": ("high-frequency noise against the other channels (robust z, in SDs)",
                       "above {t} is bad"),
    "correlation": ("share of windows not following the other channels (0–1)",
                    "above {t} is bad"),
    "jumps": ("sudden jumps per minute", "above {t} per minute is bad"),
    "mains": ("mains hum over the nearby frequencies (dB)", "{t} dB or more is bad"),
    "bridging": ("difference from the closest neighbour (variance ratio, 0 = identical)",
                 "below {t} is bad"),
    "predictability": ("share of windows its neighbours do not predict (0–1)",
                       "above {t} is bad"),
}


#: The QCSettings field holding each check's threshold (as cairn_science/qc/run.py passes it).
THRESHOLD_FIELDS = {
    "dropout": "dropout_share_max", "deviation": "deviation_z_max",
    "amplitude_factor": "deviation_factor_max", "high_frequency": "hf_z_max",
    "correlation": "correlation_bad_window_share", "jumps": "jump_rate_max_per_min",
    "mains": "mains_ratio_max_db", "bridging": "bridge_variance_ratio_max",
    "predictability": "predict_bad_window_share",
}


def measure_legend(settings: dict) -> list[tuple[str, str]]:
    """(measurement with its unit, when it is bad) for every check under ``settings`` (a
    QCSettings as a dict), for a page's key to the measurements."""
    out = []
    for check, name in THRESHOLD_FIELDS.items():
        if name not in settings:
            continue
        threshold = float(settings[name])
        measured, bad = measure_words(check, None, threshold)
        if check == "amplitude_factor":
            bad = f"{threshold:.3g} times or more, or 1/{threshold:.3g} or less, is bad"
        elif check == "mains" and "mains_excess_db" in settings:
            bad = (f"{float(settings['mains_excess_db']):.3g} dB over the median channel, or "
                   f"{threshold:.3g} dB if that is lower, or more is bad")
        out.append((measured, bad))
    return out


def measure_words(check: str, value: float | None = None,
                  threshold: float | None = None) -> tuple[str, str]:
    """(measurement with its unit, which side of ``threshold`` is bad) for a check; a
    two-sided check's low side when ``value`` is below 1."""
    key = check
    if check == "amplitude_factor" and value is not None and value < 1.0:
        key = "amplitude_factor_low"
    name, bad = MEASURES.get(key, (check.replace("_", " "), ""))
    if threshold is None or not bad:
        return name, ""
    return name, bad.format(t=f"{float(threshold):.3g}")


@dataclass(frozen=True)
class ChannelCheck:
    """Outcome of one check over all channels.

    ``values`` is NaN where a channel could not be assessed; ``note`` says in words why a
    check was skipped or adapted; ``partners`` (bridging only) names each channel's closest
    neighbour; ``low_threshold`` (two-sided checks only) is the bound a value below 1 is
    compared with.
    """

    check: str
    values: np.ndarray
    threshold: float
    flagged: np.ndarray
    note: str | None = None
    partners: list = field(default_factory=list)
    low_threshold: float | None = None

    def _low(self, index):
        return self.low_threshold is not None and self.values[index] < 1.0

    def words(self, index):
        """What a reader is told about channel ``index`` when it is flagged."""
        if self.partners:
            return WORDS[self.check].format(partner=self.partners[index])
        if self.low_threshold is not None:
            key = f"{self.check}_low" if self._low(index) else self.check
            return WORDS[key].format(limit=self.threshold)
        return WORDS[self.check]

    def threshold_for(self, index):
        """The threshold channel ``index`` was compared with."""
        return self.low_threshold if self._low(index) else self.threshold


def _skipped(check, n_channels, *, threshold, note):
    return ChannelCheck(
        check=check,
        values=np.full(n_channels, np.nan),
        threshold=float(threshold),
        flagged=np.zeros(n_channels, dtype=bool),
        note=note,
    )


def no_signal_mask(data: np.ndarray, *, sfreq_hz: float, flat_step_v: float,
                   min_run_s: float) -> np.ndarray:
    """Samples that are NaN or inside a run of at least ``min_run_s`` in which consecutive
    samples differ by no more than ``flat_step_v`` (a disconnected or saturated input)."""
    n_channels, n_times = data.shape
    min_samples = max(2, int(round(min_run_s * sfreq_hz)))
    with np.errstate(invalid="ignore"):
        steady = np.abs(np.diff(data, axis=1)) <= flat_step_v
    edges = np.zeros((n_channels, n_times + 1), dtype=np.int8)
    edges[:, 1:-1] = steady
    change = np.diff(edges, axis=1)
    starts = np.argwhere(change == 1)
    stops = np.argwhere(change == -1)
    # A steady run of differences [s, e) covers the samples s .. e (inclusive).
    long_runs = (stops[:, 1] - starts[:, 1] + 1) >= min_samples
    counts = np.zeros((n_channels, n_times + 1), dtype=np.int32)
    np.add.at(counts, (starts[long_runs, 0], starts[long_runs, 1]), 1)
    np.add.at(counts, (stops[long_runs, 0], stops[long_runs, 1] + 1), -1)
    mask = np.cumsum(counts, axis=1)[:, :n_times] > 0
    return mask | np.isnan(data)


def check_dropout(data: np.ndarray, *, sfreq_hz: float, flat_step_v=1e-8, min_run_s=0.1,
                  share_max=0.01, mask=None, keep_time=None) -> ChannelCheck:
    """Share of time without signal (flat runs or NaN) per channel; flagged above
    ``share_max``. Pass ``mask`` from :func:`no_signal_mask` to reuse it; with ``keep_time``
    the share is taken over the kept time only, so that a pause of the whole recording
    (rejected as a segment) is not charged to every channel."""
    if mask is None:
        mask = no_signal_mask(data, sfreq_hz=sfreq_hz, flat_step_v=flat_step_v,
                              min_run_s=min_run_s)
    share = (mask if keep_time is None else mask[:, keep_time]).mean(axis=1)
    return ChannelCheck("dropout", share, float(share_max), share > share_max)


def broadband_factor(spectrum, *, reference: np.ndarray, l_freq_hz: float, h_freq_hz: float,
                     exclude=None) -> np.ndarray:
    """Each channel's broadband amplitude relative to the reference channels: the square
    root of the median, over frequencies from ``l_freq_hz`` to ``h_freq_hz`` (``exclude``
    left out), of its power over the reference channels' median power.

    A rhythm strong over one region lifts a few frequencies only and leaves this near 1; a
    gain, contact or noise fault shifts most frequencies.
    """
    band = (spectrum.freqs_hz >= l_freq_hz) & (spectrum.freqs_hz <= h_freq_hz)
    if exclude is not None:
        band &= ~exclude
    log_power = np.log(np.maximum(spectrum.power[:, band], 1e-40))
    if not reference.any() or not band.any():
        return np.ones(spectrum.power.shape[0])
    typical = np.median(log_power[reference], axis=0)
    return np.exp(0.5 * np.median(log_power - typical, axis=1))


def check_deviation(data: np.ndarray, *, reference: np.ndarray, z_max: float = 5.0,
                    ratio_min: float = 1.0, factor=None, keep_time=None) -> ChannelCheck:
    """Robust z-score of each channel's amplitude against the others (PREP definition).

    ``data`` should be free of drifts (high-passed at about 1 Hz). The amplitude is the
    IQR-based standard deviation over the kept time; the z-score uses the median and the
    IQR-based spread of the reference channels' amplitudes; flagged when |z| > ``z_max``.

    Beyond PREP, when ``ratio_min`` > 1 a flagged channel's broadband amplitude ``factor``
    (see :func:`broadband_factor`) must also be at least ``ratio_min`` or at most
    1 / ``ratio_min``, so that a strong regional rhythm (frontal theta, occipital alpha) is
    not taken for a fault. ``ratio_min=1`` gives PREP's rule.
    """
    kept = data if keep_time is None else data[:, keep_time]
    amplitude = robust.iqr_sd(kept, axis=1)
    z = robust.robust_z(amplitude, reference=reference, spread="iqr")
    flagged = np.abs(z) > z_max
    if ratio_min > 1.0:
        if factor is None:
            raise ValueError("check_deviation with ratio_min > 1 needs the broadband factor")
        flagged &= (factor >= ratio_min) | (factor <= 1.0 / ratio_min)
    return ChannelCheck("deviation", z, float(z_max), flagged)


def check_amplitude_factor(factor: np.ndarray, *, factor_max: float = 3.0) -> ChannelCheck:
    """Broadband amplitude (see :func:`broadband_factor`) at least ``factor_max`` times the
    reference channels', or at most 1 / ``factor_max`` of it (ours, beside PREP's deviation:
    when the amplitudes spread widely the IQR-based z cannot fall below -5 even for a
    channel with a tenth of the others' amplitude). The value is the factor; the threshold a
    channel is compared with is ``factor_max`` above 1 and its inverse below. ``factor_max``
    0 turns the check off.
    """
    factor = np.asarray(factor, dtype=float)
    if factor_max <= 0:
        return _skipped("amplitude_factor", factor.size, threshold=factor_max,
                        note="broadband amplitude factor not checked (turned off)")
    with np.errstate(invalid="ignore"):
        flagged = (factor >= factor_max) | (factor <= 1.0 / factor_max)
    return ChannelCheck("amplitude_factor", factor, float(factor_max), flagged,
                        low_threshold=1.0 / factor_max)


def _high_band(*, sfreq_hz, power_line_hz, cutoff_hz, max_nyquist_share, mains_band_hz,
            freqs_hz):
    """Cutoff used for the high-frequency check and the mask of its band above the cutoff
    (mains bands removed); the cutoff is lowered to ``max_nyquist_share`` of the Nyquist
    frequency when the sampling rate is too low for ``cutoff_hz``."""
    nyquist_hz = sfreq_hz / 2.0
    used_hz = min(cutoff_hz, max_nyquist_share * nyquist_hz)
    mains = mains_mask(freqs_hz, power_line_hz=power_line_hz, band_hz=mains_band_hz,
                       nyquist_hz=nyquist_hz + mains_band_hz)
    return used_hz, (freqs_hz >= used_hz) & ~mains, mains


def check_high_frequency(spectrum, *, sfreq_hz: float, reference: np.ndarray, power_line_hz=None,
                         cutoff_hz=50.0, max_nyquist_share=0.8, min_band_hz=5.0, l_freq_hz=1.0,
                         mains_band_hz=1.0, z_max=5.0, ratio_min=1.0) -> ChannelCheck:
    """High-frequency noise: amplitude above the cutoff over amplitude from ``l_freq_hz`` to
    the cutoff (square root of the band-power ratio of the Welch spectrum, mains bands left
    out), robust z-scored with median and MAD as PREP does; flagged when z > ``z_max`` and,
    beyond PREP, the ratio is at least ``ratio_min`` times the median channel's.

    PREP uses 50 Hz and skips the check at 100 Hz sampling or less. Here the cutoff drops to
    ``max_nyquist_share`` of Nyquist when needed (40 Hz at 100 Hz sampling, 50 Hz at 125 Hz)
    and the check is skipped only when the band above it is narrower than ``min_band_hz``.
    """
    freqs_hz = spectrum.freqs_hz
    used_hz, high, mains = _high_band(
        sfreq_hz=sfreq_hz, power_line_hz=power_line_hz, cutoff_hz=cutoff_hz,
        max_nyquist_share=max_nyquist_share, mains_band_hz=mains_band_hz, freqs_hz=freqs_hz,
    )
    n_channels = spectrum.power.shape[0]
    step_hz = freqs_hz[1] - freqs_hz[0]
    if high.sum() * step_hz < min_band_hz:
        return _skipped("high_frequency", n_channels, threshold=z_max, note=(
            f"high-frequency noise not checked: at {sfreq_hz:g} Hz sampling less than "
            f"{min_band_hz:g} Hz of band is left above {used_hz:g} Hz"
        ))
    low = (freqs_hz >= l_freq_hz) & (freqs_hz < used_hz) & ~mains
    high_power = spectrum.power[:, high].sum(axis=1)
    low_power = spectrum.power[:, low].sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        noisiness = np.sqrt(high_power / low_power)
    z = robust.robust_z(noisiness, reference=reference & np.isfinite(noisiness), spread="mad")
    note = None
    if used_hz < cutoff_hz:
        note = (f"high-frequency noise checked above {used_hz:g} Hz instead of "
                f"{cutoff_hz:g} Hz (sampling rate {sfreq_hz:g} Hz)")
    with np.errstate(invalid="ignore"):
        flagged = z > z_max
    pool = noisiness[reference & np.isfinite(noisiness)]
    if ratio_min > 1.0 and pool.size:
        with np.errstate(invalid="ignore"):
            flagged &= noisiness >= ratio_min * np.median(pool)
    return ChannelCheck("high_frequency", z, float(z_max), flagged, note=note)


@dataclass(frozen=True)
class Jumps:
    """Sudden jumps of a recording (see :func:`find_jumps`).

    ``own`` (channels x steps) marks each channel's jumps that no common event explains;
    ``shared_onsets_s`` lists the moments (s) of the jumps that most channels make together.
    """

    own: np.ndarray
    shared_onsets_s: np.ndarray


def find_jumps(data: np.ndarray, *, sfreq_hz: float, reference: np.ndarray, z_min=10.0,
               step_min_v=40e-6, abrupt_ratio=2.0, shared_z_min=4.0, shared_share=0.25,
               min_gap_s=0.1, keep_time=None, no_signal=None) -> Jumps:
    """Sudden jumps (electrode pops, breaks between joined recordings, amplifier resets).

    A jump is a sample-to-sample step of one channel that exceeds both ``z_min`` robust
    standard deviations of its own steps and ``step_min_v``, and is at least
    ``abrupt_ratio`` times the steps just before and after it: the level changes within one
    sample. A blink or eye movement rises over several samples, and a lone spike or a burst
    of high-frequency noise makes two opposite steps in a row; neither is a jump.

    A jump is shared when at least ``shared_share`` of the reference channels step by at
    least ``shared_z_min`` robust standard deviations of their own steps at the same moment
    (within one sample): a break in the recording or a reset moves every channel at once,
    though by amounts that clear the per-channel threshold on a few channels only. Shared
    jumps closer than ``min_gap_s`` are one event. Rejected time (outside ``keep_time``) and
    no-signal runs are left out.
    """
    n_channels, n_times = data.shape
    steps = np.abs(np.diff(data, axis=1))
    usable = np.ones(n_times - 1, dtype=bool)
    if keep_time is not None:
        usable &= keep_time[1:] & keep_time[:-1]
    per_channel = np.broadcast_to(usable, steps.shape)
    if no_signal is not None:
        per_channel = per_channel & ~(no_signal[:, 1:] | no_signal[:, :-1])
    scale = np.array([robust.mad_sd(row[ok]) if ok.any() else np.nan
                      for row, ok in zip(steps, per_channel, strict=True)])
    padded = np.pad(steps, ((0, 0), (1, 1)))
    around = np.maximum(padded[:, :-2], padded[:, 2:])
    with np.errstate(divide="ignore", invalid="ignore"):
        z = steps / scale[:, None]
        large = ((z >= z_min) & (steps >= step_min_v) & (steps >= abrupt_ratio * around)
                 & per_channel)
        unusual = (z >= shared_z_min) & per_channel
    needed = max(2, int(np.ceil(shared_share * reference.sum())))
    together = ndimage.maximum_filter1d(unusual[reference].astype(np.uint8), size=3, axis=1)
    shared = together.sum(axis=0) >= needed
    gap = max(1, int(round(min_gap_s * sfreq_hz)))
    at = np.flatnonzero(large.any(axis=0) & shared)
    first = at[np.r_[True, np.diff(at) > gap]] if at.size else at
    return Jumps(own=large & ~shared, shared_onsets_s=(first + 1) / sfreq_hz)


def check_jumps(data: np.ndarray, *, sfreq_hz: float, reference: np.ndarray, z_min=10.0,
                step_min_v=40e-6, abrupt_ratio=2.0, shared_z_min=4.0, rate_max_per_min=1.0,
                min_count=2, shared_share=0.25, min_gap_s=0.1, keep_time=None, no_signal=None,
                jumps=None) -> ChannelCheck:
    """A channel's own sudden jumps (see :func:`find_jumps`; jumps most channels share are
    not counted against any channel). Pass ``jumps`` to reuse them; ``keep_time`` then
    limits the count to kept time.

    Jumps closer than ``min_gap_s`` count once. The value is jumps per minute of kept time;
    flagged above ``rate_max_per_min`` with at least ``min_count`` jumps.
    """
    n_channels, n_times = data.shape
    if jumps is None:
        jumps = find_jumps(data, sfreq_hz=sfreq_hz, reference=reference, z_min=z_min,
                           step_min_v=step_min_v, abrupt_ratio=abrupt_ratio,
                           shared_z_min=shared_z_min, shared_share=shared_share,
                           min_gap_s=min_gap_s, keep_time=keep_time, no_signal=no_signal)
    usable = np.ones(n_times - 1, dtype=bool)
    if keep_time is not None:
        usable &= keep_time[1:] & keep_time[:-1]
    own = jumps.own & usable
    gap = max(1, int(round(min_gap_s * sfreq_hz)))
    counts = np.zeros(n_channels)
    for index in range(n_channels):
        where = np.flatnonzero(own[index])
        if where.size:
            counts[index] = 1 + np.count_nonzero(np.diff(where) > gap)
    minutes = usable.sum() / sfreq_hz / 60.0
    rate = counts / minutes if minutes > 0 else np.full(n_channels, np.nan)
    with np.errstate(invalid="ignore"):
        flagged = (rate > rate_max_per_min) & (counts >= min_count)
    return ChannelCheck("jumps", rate, float(rate_max_per_min), flagged)


def check_mains(spectrum, *, sfreq_hz: float, power_line_hz, reference: np.ndarray, band_hz=1.0,
                flank_inner_hz=2.0, flank_outer_hz=5.0, excess_db=12.0,
                ratio_max_db=40.0) -> ChannelCheck:
    """Mains hum per channel: mean power density within ``band_hz`` of the mains frequency
    and its harmonics over that of the flanks beside them, in dB.

    A channel is flagged when its ratio exceeds the median of the reference channels by
    ``excess_db`` (much worse than the others: a poor contact) or reaches ``ratio_max_db``
    whatever the others do (hum dwarfing the EEG at that frequency). The threshold reported
    is the lower of the two.
    """
    n_channels = spectrum.power.shape[0]
    nyquist_hz = sfreq_hz / 2.0
    freqs_hz = spectrum.freqs_hz
    centres_hz = [c for c in harmonics_hz(power_line_hz, nyquist_hz=nyquist_hz)
                  if c + band_hz < nyquist_hz]
    if not centres_hz:
        reason = ("no mains frequency given" if not power_line_hz else
                  f"mains frequency {power_line_hz:g} Hz is not below the Nyquist frequency")
        return _skipped("mains", n_channels, threshold=ratio_max_db,
                        note=f"mains hum not checked: {reason}")
    in_band = np.zeros(freqs_hz.shape, dtype=bool)
    in_flank = np.zeros(freqs_hz.shape, dtype=bool)
    for centre_hz in centres_hz:
        offset = np.abs(freqs_hz - centre_hz)
        in_band |= offset <= band_hz
        in_flank |= (offset >= flank_inner_hz) & (offset <= flank_outer_hz)
    in_flank &= ~in_band & (freqs_hz > 0) & (freqs_hz < nyquist_hz)
    floor = 1e-30
    ratio = (spectrum.power[:, in_band].mean(axis=1) + floor) / (
        spectrum.power[:, in_flank].mean(axis=1) + floor
    )
    ratio_db = 10.0 * np.log10(ratio)
    pool = ratio_db[reference]
    threshold = ratio_max_db
    if pool.size:
        threshold = min(float(np.median(pool)) + excess_db, ratio_max_db)
    return ChannelCheck("mains", ratio_db, float(threshold), ratio_db >= threshold)


def window_covariances(data: np.ndarray, *, window_samples: int) -> np.ndarray:
    """Covariance matrices of whole non-overlapping windows, shape (n_windows, n_ch, n_ch)."""
    frames = windows_view(data, window_samples=window_samples)
    frames = np.moveaxis(frames, 1, 0)
    frames = frames - frames.mean(axis=-1, keepdims=True)
    return frames @ np.swapaxes(frames, -1, -2) / window_samples


def _windows_without(mask, *, window_samples):
    """Per window: True where ``mask`` (channels x times, or times) is False throughout."""
    return ~windows_view(mask, window_samples=window_samples).any(axis=-1)


def check_correlation(data: np.ndarray, *, sfreq_hz: float, reference: np.ndarray,
                      window_s: float = 1.0, correlation_min: float = 0.4, quantile=0.98,
                      bad_window_share=0.01, keep_time=None, no_signal=None,
                      covariances=None) -> ChannelCheck:
    """Low correlation with the other channels (PREP definition).

    ``data`` should be band-limited (about 1-45 Hz). In each window a channel's "best
    match" is the ``quantile`` of its absolute correlations with the other reference
    channels; a window is bad when that is below ``correlation_min``. The value is the share
    of bad windows, counting only windows in kept time where the channel has signal;
    flagged above ``bad_window_share``.
    """
    n_channels = data.shape[0]
    window_samples = int(round(window_s * sfreq_hz))
    if reference.sum() < 2 or data.shape[1] < window_samples:
        return _skipped("correlation", n_channels, threshold=bad_window_share,
                        note="correlation not checked: fewer than two usable channels "
                             "or shorter than one window")
    if covariances is None:
        covariances = window_covariances(data, window_samples=window_samples)
    scale = np.sqrt(np.einsum("wii->wi", covariances))
    with np.errstate(divide="ignore", invalid="ignore"):
        correlation = np.abs(covariances / (scale[:, :, None] * scale[:, None, :]))
    correlation = np.nan_to_num(correlation, nan=0.0)
    others = np.broadcast_to(reference[None, :], (n_channels, n_channels)).copy()
    np.fill_diagonal(others, False)
    # Push non-partners below every real correlation, then read the quantile among the
    # k_i partners of channel i from the top of the sorted row.
    ranked = np.sort(np.where(others[None], correlation, -1.0), axis=-1)
    n_others = others.sum(axis=1)
    position = np.clip(quantile * n_others - 0.5, 0, np.maximum(n_others - 1, 0))
    lower = np.floor(position).astype(int)
    upper = np.ceil(position).astype(int)
    first = n_channels - n_others
    rows = np.arange(n_channels)
    low_value = ranked[:, rows, first + lower]
    high_value = ranked[:, rows, first + upper]
    best_match = low_value + (high_value - low_value) * (position - lower)

    counted = np.ones((n_channels, covariances.shape[0]), dtype=bool)
    if keep_time is not None:
        counted &= _windows_without(~keep_time, window_samples=window_samples)[None, :]
    if no_signal is not None:
        counted &= _windows_without(no_signal, window_samples=window_samples)
    bad = (best_match.T < correlation_min) & counted
    with np.errstate(invalid="ignore"):
        share = bad.sum(axis=1) / counted.sum(axis=1)
    share[n_others == 0] = np.nan
    with np.errstate(invalid="ignore"):
        flagged = share > bad_window_share
    return ChannelCheck("correlation", share, float(bad_window_share), flagged)


def check_bridging(data: np.ndarray, *, sfreq_hz: float, pairs: np.ndarray, window_s: float = 1.0,
                   ratio_max: float = 0.01, ch_names=None, keep_time=None,
                   covariances=None) -> ChannelCheck:
    """Near-identical neighbours: the variance of a pair's difference over the pair's mean
    variance, median over windows; flagged below ``ratio_max`` for both channels.

    ``pairs`` (index pairs, e.g. neighbours by position) limits which channels are compared.
    The value per channel is its lowest ratio with any partner; the partner is remembered.
    """
    n_channels = data.shape[0]
    window_samples = int(round(window_s * sfreq_hz))
    names = list(ch_names) if ch_names is not None else [str(i) for i in range(n_channels)]
    if len(pairs) == 0 or data.shape[1] < window_samples:
        return _skipped("bridging", n_channels, threshold=ratio_max,
                        note="near-identical neighbours not checked: no channel pairs")
    if covariances is None:
        covariances = window_covariances(data, window_samples=window_samples)
    if keep_time is not None:
        kept = _windows_without(~keep_time, window_samples=window_samples)
        if kept.sum() >= 1:
            covariances = covariances[kept]
    first, second = pairs[:, 0], pairs[:, 1]
    var_first = covariances[:, first, first]
    var_second = covariances[:, second, second]
    mean_var = 0.5 * (var_first + var_second)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = (var_first + var_second - 2.0 * covariances[:, first, second]) / mean_var
    ratio = np.where(mean_var > 0, ratio, np.nan)
    pair_ratio = np.nanmedian(ratio, axis=0) if np.isfinite(ratio).any() else ratio[0]
    values = np.full(n_channels, np.nan)
    partners = [""] * n_channels
    for (a, b), value in zip(pairs, pair_ratio, strict=True):
        if not np.isfinite(value):
            continue
        for this, other in ((a, b), (b, a)):
            if not values[this] <= value:
                values[this] = value
                partners[this] = names[other]
    with np.errstate(invalid="ignore"):
        flagged = values < ratio_max
    return ChannelCheck("bridging", values, float(ratio_max), flagged, partners=partners)


def check_predictability(data: np.ndarray, *, sfreq_hz: float, unit_positions: np.ndarray,
                         predictors: np.ndarray, window_s: float = 5.0,
                         correlation_min: float = 0.75, bad_window_share: float = 0.4,
                         n_subsets: int = 50, subset_share: float = 0.25, min_subset: int = 4,
                         keep_time=None, no_signal=None, random_state: int = 0,
                         max_block_values: int = 4_000_000) -> ChannelCheck:
    """Prediction from the other channels (PREP's random-sample definition).

    ``data`` should be band-limited (about 1-45 Hz). ``n_subsets`` random subsets of
    ``subset_share`` of the positioned channels are drawn from the ``predictors``; each
    predicts every positioned channel by spherical splines, and the median of the
    predictions is correlated with the channel in windows of ``window_s``. As in PREP a
    subset may hold the channel itself and then reproduces it; the PREP thresholds are meant
    for that median. The value is the share of windows below ``correlation_min``; flagged
    above ``bad_window_share``. The check is skipped when a subset would hold fewer than
    ``min_subset`` channels. ``random_state`` seeds the subsets.
    """
    n_channels, n_times = data.shape
    positioned = np.all(np.isfinite(unit_positions), axis=1)
    pool = np.flatnonzero(predictors & positioned)
    targets = np.flatnonzero(positioned)
    subset_size = int(round(subset_share * positioned.sum()))
    window_samples = int(round(window_s * sfreq_hz))
    if subset_size < min_subset or pool.size < subset_size + 1:
        return _skipped("predictability", n_channels, threshold=bad_window_share, note=(
            "prediction from the other channels not checked: "
            f"{positioned.sum()} channels with positions, {pool.size} of them usable as "
            f"predictors; subsets of {subset_share:.0%} need at least {min_subset} channels "
            f"and one more usable channel than the subset"
        ))
    if n_times < window_samples:
        return _skipped("predictability", n_channels, threshold=bad_window_share,
                        note="prediction from the other channels not checked: recording "
                             f"shorter than one {window_s:g} s window")
    rng = np.random.default_rng(random_state)
    chosen = np.argsort(rng.random((n_subsets, pool.size)), axis=-1)[:, :subset_size]
    from_unit = unit_positions[pool[chosen]]
    to_unit = np.broadcast_to(unit_positions[targets][None], (n_subsets, targets.size, 3))
    weights_small = spline_interpolation_matrix(from_unit, to_unit)
    weights = np.zeros((n_subsets, targets.size, pool.size))
    np.put_along_axis(weights, chosen[:, None, :], weights_small, axis=-1)
    # Laid out so that the subsets are the last, contiguous axis of each prediction block;
    # single precision halves the cost of the median and is ample for a correlation.
    weights_t = np.ascontiguousarray(
        np.moveaxis(weights, 0, 1).reshape(targets.size * n_subsets, pool.size).T,
        dtype=np.float32,
    )

    frames = windows_view(data, window_samples=window_samples)
    n_windows = frames.shape[1]
    counted = np.ones((targets.size, n_windows), dtype=bool)
    if keep_time is not None:
        counted &= _windows_without(~keep_time, window_samples=window_samples)[None, :]
    if no_signal is not None:
        counted &= _windows_without(no_signal[targets], window_samples=window_samples)
    correlation = np.ones((targets.size, n_windows))
    middle = [(n_subsets - 1) // 2, n_subsets // 2]
    block = max(1, max_block_values // (n_subsets * targets.size * window_samples))
    for start in range(0, n_windows, block):
        stop = min(n_windows, start + block)
        actual_pool = frames[pool, start:stop].reshape(pool.size, -1).astype(np.float32)
        predicted = (actual_pool.T @ weights_t).reshape(-1, targets.size, n_subsets)
        # numpy sorts rows of 50 float32 with its vectorised sort faster than it partitions
        # them at the two middle indices (about 3-5x), and the middle values are the same
        predicted.sort(axis=-1)
        median = 0.5 * (predicted[..., middle[0]] + predicted[..., middle[1]])
        median = median.T.reshape(targets.size, stop - start, -1).astype(float)
        actual = frames[targets, start:stop]
        actual = actual - actual.mean(axis=-1, keepdims=True)
        median = median - median.mean(axis=-1, keepdims=True)
        with np.errstate(divide="ignore", invalid="ignore"):
            correlation[:, start:stop] = np.sum(actual * median, axis=-1) / np.sqrt(
                np.sum(actual**2, axis=-1) * np.sum(median**2, axis=-1)
            )
    correlation = np.nan_to_num(correlation, nan=0.0)
    bad = (correlation < correlation_min) & counted
    values = np.full(n_channels, np.nan)
    with np.errstate(invalid="ignore"):
        values[targets] = bad.sum(axis=1) / counted.sum(axis=1)
        flagged = values > bad_window_share
    return ChannelCheck("predictability", values, float(bad_window_share), flagged)
