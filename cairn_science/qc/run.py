"""``run_qc``: every check on one recording, combined into channel status, segments and verdict.

Order: no-signal runs first (they need the raw samples); then provisional bad segments on
the channels with signal, so that the channel checks (no-signal share included) compare
channels on clean time; then the channel checks; then the final segments on the good
channels only, blinks and the verdict.
"""

import mne
import numpy as np

from . import checks
from .positions import nearest_neighbours, on_unit_sphere, resolve_positions
from .result import CODE_VERSION, ChannelResult, PowerSpectrum, QCResult, Reason
from .segments import (
    combine_segments,
    count_blinks,
    jump_segments,
    keep_mask,
    merge_segments,
    reject_windows,
    window_flags,
)
from .settings import QCSettings
from .signals import highpass, lowpass, lowpass_applies, mains_mask, welch_spectrum
from .verdict import MOSTLY_SILENT_SHARE, channel_verdict

CHECK_ORDER = ("dropout", "deviation", "amplitude_factor", "high_frequency", "correlation",
               "jumps", "mains", "bridging", "predictability")
MIN_KEPT_SHARE = 0.5
UV = 1e-6


def run_qc(raw, *, settings=None, power_line_hz=50.0, site_status=None, positions=None,
           random_state=0):
    """Quality checks of the EEG channels of an :class:`mne.io.Raw` (other types ignored).

    Parameters
    ----------
    raw : mne.io.Raw
        The recording.
    settings : QCSettings | None
        Thresholds of the study protocol; defaults when None.
    power_line_hz : float | None
        Mains frequency (BIDS PowerLineFrequency); None skips the mains check.
    site_status : dict | None
        ``{ch_name: (status, description)}`` from channels.tsv; status "bad" marks a
        channel bad by the site. Channels in ``raw.info["bads"]`` count as marked too.
    positions : dict | None
        ``{ch_name: (x, y, z)}`` in m (electrodes.tsv); None uses the template 10-20
        positions by name (T3/T4/T5/T6 matched to T7/T8/P7/P8 where needed).
    random_state : int | numpy.random.Generator | None
        Seed of the random channel subsets of the predictability check.
    """
    picks = mne.pick_types(raw.info, eeg=True, exclude=[])
    if len(picks) == 0:
        raise ValueError("the recording has no EEG channels to check")
    ch_names = [raw.ch_names[index] for index in picks]
    marked = {}
    for name, (status, description) in (site_status or {}).items():
        if str(status).lower() == "bad" and name in ch_names:
            marked[name] = None if description in (None, "", "n/a") else str(description)
    for name in raw.info["bads"]:
        if name in ch_names:
            marked.setdefault(name, None)
    return run_qc_array(
        raw.get_data(picks=picks),
        sfreq_hz=float(raw.info["sfreq"]),
        ch_names=ch_names,
        settings=settings,
        power_line_hz=power_line_hz,
        marked_by_site=marked,
        positions=positions,
        random_state=random_state,
    )


def _fill_missing(data):
    """NaN replaced by the channel's median (zero for a channel without any number)."""
    if not np.isnan(data).any():
        return data
    filled = data.copy()
    for index in np.flatnonzero(np.isnan(data).any(axis=1)):
        row = filled[index]
        missing = np.isnan(row)
        row[missing] = 0.0 if missing.all() else np.median(row[~missing])
    return filled


def _pairs(points_m, *, n_neighbours):
    """Neighbour pairs by position; channels without a position are paired with all."""
    pairs = nearest_neighbours(points_m, n_neighbours=n_neighbours)
    unplaced = np.flatnonzero(~np.all(np.isfinite(points_m), axis=1))
    extra = [tuple(sorted((int(i), int(j)))) for i in unplaced for j in range(len(points_m))
             if j != i]
    if extra:
        pairs = np.unique(np.vstack([pairs, np.array(extra)]), axis=0)
    return pairs


def _decimated(data, mask, keep, *, factor):
    """Every ``factor``-th sample of band-limited data, with masks reduced alike."""
    if factor == 1:
        return data, mask, keep
    n_times = data.shape[1] // factor * factor
    reduced_mask = mask[:, :n_times].reshape(mask.shape[0], -1, factor).any(axis=-1)
    reduced_keep = None
    if keep is not None:
        reduced_keep = keep[:n_times].reshape(-1, factor).all(axis=-1)
    return data[:, :n_times:factor], reduced_mask, reduced_keep


def run_qc_array(data, *, sfreq_hz, ch_names, settings=None, power_line_hz=50.0,
                 marked_by_site=None, positions=None, random_state=0):
    """Quality checks of an array of EEG (channels x times, volts); see :func:`run_qc`.

    ``marked_by_site`` maps the channels the site marked bad to their description (or None).
    """
    settings = QCSettings() if settings is None else settings
    data = np.asarray(data, dtype=float)
    ch_names = list(ch_names)
    n_channels, n_times = data.shape
    marked_by_site = dict(marked_by_site or {})
    marked = np.array([name in marked_by_site for name in ch_names])
    notes = []

    no_signal = checks.no_signal_mask(
        data, sfreq_hz=sfreq_hz, flat_step_v=settings.flat_step_uv * UV,
        min_run_s=settings.dropout_min_s,
    )
    mostly_silent = no_signal.mean(axis=1) >= MOSTLY_SILENT_SHARE
    live = ~marked & ~mostly_silent
    filled = _fill_missing(data)

    flags = window_flags(
        filled, sfreq_hz=sfreq_hz, no_signal=no_signal, window_s=settings.segment_window_s,
        peak_to_peak_v=settings.segment_peak_to_peak_uv * UV,
        muscle_l_freq_hz=settings.muscle_l_freq_hz, muscle_h_freq_hz=settings.muscle_h_freq_hz,
        muscle_z_max=settings.muscle_z_max, power_line_hz=power_line_hz,
        mains_band_hz=settings.mains_band_hz,
    )
    if flags.muscle_note:
        notes.append(flags.muscle_note)
    jumps = checks.find_jumps(
        filled, sfreq_hz=sfreq_hz, reference=live if live.any() else ~marked,
        z_min=settings.jump_z_min, step_min_v=settings.jump_min_uv * UV,
        abrupt_ratio=settings.jump_abrupt_ratio, shared_z_min=settings.jump_shared_z_min,
        shared_share=settings.segment_channel_share, no_signal=no_signal,
    )
    provisional = _segments(flags, channels=live if live.any() else ~marked,
                            settings=settings, sfreq_hz=sfreq_hz, jumps=jumps)
    keep = keep_mask(provisional, n_times=n_times, sfreq_hz=sfreq_hz)
    if keep.mean() < MIN_KEPT_SHARE:
        notes.append("channel checks used the whole recording: bad segments cover more than "
                     f"{1 - MIN_KEPT_SHARE:.0%} of it")
        keep = None

    drift_free = highpass(filled, sfreq_hz=sfreq_hz, l_freq_hz=settings.highpass_hz)
    results, spectrum = _channel_checks(
        filled, drift_free, sfreq_hz=sfreq_hz, ch_names=ch_names, marked=marked,
        no_signal=no_signal, keep=keep, settings=settings, power_line_hz=power_line_hz,
        positions=positions, random_state=random_state, notes=notes, jumps=jumps,
    )
    channels = _channel_results(ch_names, results, marked_by_site=marked_by_site,
                                mostly_silent=mostly_silent)
    bad = np.array([channels[name].status == "bad" for name in ch_names])
    reference = ~marked & ~results["dropout"].flagged

    segments = _segments(flags, channels=~bad if (~bad).any() else reference,
                         settings=settings, sfreq_hz=sfreq_hz, jumps=jumps)
    duration_s = n_times / sfreq_hz
    rejected_share = min(1.0, sum(segment.duration_s for segment in segments) / duration_s)
    blinks = count_blinks(
        drift_free, sfreq_hz=sfreq_hz, ch_names=ch_names, usable=~bad,
        keep_time=keep_mask(segments, n_times=n_times, sfreq_hz=sfreq_hz),
        min_amplitude_v=settings.blink_min_amplitude_uv * UV, z_min=settings.blink_z_min,
    )
    verdict_inputs = {
        "sfreq_hz": float(sfreq_hz), "duration_s": float(duration_s),
        "n_with_signal": int((~mostly_silent).sum()), "rejected_share": float(rejected_share),
        "uncorrelated_share": float((results["correlation"].flagged & reference).sum())
        / max(1, int(reference.sum())),
    }
    verdict, verdict_reasons = channel_verdict(
        settings=settings, inputs=verdict_inputs,
        channels={name: (channel.status, [reason.words for reason in channel.reasons])
                  for name, channel in channels.items()},
    )
    power_db = 10.0 * np.log10(np.maximum(spectrum.power / UV**2, 1e-30))
    return QCResult(
        channels=channels,
        segments=segments,
        rejected_share=float(rejected_share),
        blinks=blinks,
        verdict=verdict,
        verdict_reasons=verdict_reasons,
        verdict_inputs=verdict_inputs,
        psd=PowerSpectrum(freqs_hz=spectrum.freqs_hz, ch_names=ch_names, power_db=power_db),
        sfreq_hz=float(sfreq_hz),
        duration_s=float(duration_s),
        power_line_hz=None if power_line_hz is None else float(power_line_hz),
        notes=notes,
        settings_digest=settings.digest(),
        code_version=CODE_VERSION,
    )


def _segments(flags, *, channels, settings, sfreq_hz, jumps):
    """Rejected intervals from the window flags of ``channels``, and around the jumps most
    channels make together that these do not already cover."""
    windows = merge_segments(
        reject_windows(flags, channels=channels, channel_share=settings.segment_channel_share),
        starts=flags.starts, stops=flags.stops, sfreq_hz=sfreq_hz,
    )
    around_jumps = jump_segments(jumps.shared_onsets_s, margin_s=settings.jump_margin_s,
                                 duration_s=flags.stops[-1] / sfreq_hz, rejected=windows)
    return combine_segments(windows, around_jumps)


def _channel_checks(filled, drift_free, *, sfreq_hz, ch_names, marked, no_signal, keep,
                    settings, power_line_hz, positions, random_state, notes, jumps):
    """Every channel check on the kept time; returns ({check: ChannelCheck}, Spectrum) and
    appends the checks' notes to ``notes``."""
    n_channels, n_times = filled.shape
    band_limited = lowpass(drift_free, sfreq_hz=sfreq_hz, h_freq_hz=settings.lowpass_hz)
    dropout = checks.check_dropout(filled, sfreq_hz=sfreq_hz,
                                   share_max=settings.dropout_share_max, mask=no_signal,
                                   keep_time=keep)
    reference = ~marked & ~dropout.flagged
    spectrum = welch_spectrum(filled, sfreq_hz=sfreq_hz, window_s=settings.psd_window_s,
                              keep_time=keep)
    mains_bands = mains_mask(spectrum.freqs_hz, power_line_hz=power_line_hz,
                             band_hz=settings.mains_band_hz, nyquist_hz=sfreq_hz / 2.0 + 1.0)
    window_samples = int(round(settings.correlation_window_s * sfreq_hz))
    covariances = None
    if n_times >= window_samples:
        covariances = checks.window_covariances(band_limited, window_samples=window_samples)
    points_m = resolve_positions(ch_names, positions)
    placed = np.all(np.isfinite(points_m), axis=1)
    unit = np.full_like(points_m, np.nan)
    if placed.any():
        unit[placed] = on_unit_sphere(points_m[placed])
    if not placed.all():
        missing = [name for name, ok in zip(ch_names, placed, strict=True) if not ok]
        notes.append(f"no electrode position for {', '.join(missing)}: compared with every "
                     "channel for near-identical signals, not predicted from neighbours")

    factor = checks.broadband_factor(spectrum, reference=reference,
                                     l_freq_hz=settings.highpass_hz,
                                     h_freq_hz=settings.lowpass_hz, exclude=mains_bands)
    results = {
        "dropout": dropout,
        "deviation": checks.check_deviation(
            drift_free, reference=reference, z_max=settings.deviation_z_max,
            ratio_min=settings.deviation_ratio_min, factor=factor, keep_time=keep,
        ),
        "amplitude_factor": checks.check_amplitude_factor(
            factor, factor_max=settings.deviation_factor_max),
        "high_frequency": checks.check_high_frequency(
            spectrum, sfreq_hz=sfreq_hz, reference=reference, power_line_hz=power_line_hz,
            cutoff_hz=settings.hf_cutoff_hz,
            max_nyquist_share=settings.hf_cutoff_max_nyquist_share,
            min_band_hz=settings.hf_min_band_hz, l_freq_hz=settings.highpass_hz,
            mains_band_hz=settings.mains_band_hz, z_max=settings.hf_z_max,
            ratio_min=settings.hf_ratio_min,
        ),
        "correlation": checks.check_correlation(
            band_limited, sfreq_hz=sfreq_hz, reference=reference,
            window_s=settings.correlation_window_s, correlation_min=settings.correlation_min,
            quantile=settings.correlation_quantile,
            bad_window_share=settings.correlation_bad_window_share, keep_time=keep,
            no_signal=no_signal, covariances=covariances,
        ),
        "jumps": checks.check_jumps(
            filled, sfreq_hz=sfreq_hz, reference=reference, z_min=settings.jump_z_min,
            step_min_v=settings.jump_min_uv * UV,
            rate_max_per_min=settings.jump_rate_max_per_min,
            min_count=settings.jump_min_count, keep_time=keep, jumps=jumps,
        ),
        "mains": checks.check_mains(
            spectrum, sfreq_hz=sfreq_hz, power_line_hz=power_line_hz, reference=reference,
            band_hz=settings.mains_band_hz, flank_inner_hz=settings.mains_flank_inner_hz,
            flank_outer_hz=settings.mains_flank_outer_hz, excess_db=settings.mains_excess_db,
            ratio_max_db=settings.mains_ratio_max_db,
        ),
        "bridging": checks.check_bridging(
            band_limited, sfreq_hz=sfreq_hz,
            pairs=_pairs(points_m, n_neighbours=settings.n_neighbours),
            window_s=settings.correlation_window_s,
            ratio_max=settings.bridge_variance_ratio_max, ch_names=ch_names, keep_time=keep,
            covariances=covariances,
        ),
    }
    if settings.check_predictability:
        predictors = reference.copy()
        for name in ("deviation", "amplitude_factor", "correlation", "bridging"):
            predictors &= ~results[name].flagged
        # 2.5 samples per cycle of the low-pass edge are enough for a correlation; every
        # further sample would only add cost.
        step = 1
        if lowpass_applies(sfreq_hz=sfreq_hz, h_freq_hz=settings.lowpass_hz, n_times=n_times):
            step = max(1, int(sfreq_hz // (2.5 * settings.lowpass_hz)))
        reduced, reduced_mask, reduced_keep = _decimated(band_limited, no_signal, keep,
                                                         factor=step)
        results["predictability"] = checks.check_predictability(
            reduced, sfreq_hz=sfreq_hz / step, unit_positions=unit, predictors=predictors,
            window_s=settings.predict_window_s,
            correlation_min=settings.predict_correlation_min,
            bad_window_share=settings.predict_bad_window_share,
            n_subsets=settings.predict_n_subsets, subset_share=settings.predict_subset_share,
            min_subset=settings.predict_min_subset,
            keep_time=reduced_keep, no_signal=reduced_mask, random_state=random_state,
        )
    notes.extend(outcome.note for outcome in results.values() if outcome.note)
    return results, spectrum


def _channel_results(ch_names, results, *, marked_by_site, mostly_silent):
    """Status, reasons and metrics per channel; a channel without signal most of the time
    is reported for that alone (its other values mean little)."""
    channels = {}
    for index, name in enumerate(ch_names):
        reasons = []
        if name in marked_by_site:
            reasons.append(Reason("marked_by_site", checks.WORDS["marked_by_site"]))
        for check in CHECK_ORDER:
            outcome = results.get(check)
            if outcome is None or not outcome.flagged[index]:
                continue
            if mostly_silent[index] and check != "dropout":
                continue
            reasons.append(Reason(check, outcome.words(index), float(outcome.values[index]),
                                  outcome.threshold_for(index)))
        channels[name] = ChannelResult(
            status="bad" if reasons else "good",
            reasons=reasons,
            metrics={check: float(outcome.values[index]) for check, outcome in results.items()},
            marked_by_site=name in marked_by_site,
            site_description=marked_by_site.get(name),
        )
    return channels
