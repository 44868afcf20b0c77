"""EEG signal preparation for the workload features: channel harmonisation, notch, band-pass,
resampling, bad-channel repair and re-reference, each step recorded with its parameters.

:class:`PrepSettings` holds every preparation parameter with its one default and its limits
(``_parameter_constraints``, checked by :func:`cairn_science.params.validate`). This module
loads mne and scipy only when a recording is prepared, so that a web process can build and
check settings without them.
"""

from __future__ import annotations

import dataclasses
import functools
import warnings
from dataclasses import dataclass
from fractions import Fraction
from typing import ClassVar

import numpy as np

from cairn_science.params import InstanceOf, Interval, ListOf, Options, Real, raise_for, validate

from .windows import OVERLAP, WINDOW_S

#: Classic 10-20 names and their modern equivalents, which name the same electrode sites.
CLASSIC_NAMES = {"T3": "T7", "T4": "T8", "T5": "P7", "T6": "P8"}
BAD_CHANNEL_MODES = ("interpolate", "drop")
REFERENCES = ("average", "as_recorded")

# MNE's notch_filter defaults: notch width freq / 200, 1 Hz transition band in all.
NOTCH_WIDTH_SHARE = 1.0 / 200.0
NOTCH_TRANS_BANDWIDTH_HZ = 1.0

# Polyphase resampling (scipy's resample_poly) is used when the rate ratio is a fraction
# with terms up to this; other ratios fall back to MNE's FFT resampling.
MAX_POLYPHASE_TERM = 10_000
# Interpolation needs this many good channels with a template position.
MIN_INTERPOLATION_SOURCES = 3

_CLASSIC_TO_MODERN = {classic.lower(): modern.lower() for classic, modern in CLASSIC_NAMES.items()}


def site_key(ch_name: str) -> str:
    """Case-insensitive key of an electrode name; classic 10-20 names (T3, T4, T5, T6) map to
    their modern equivalents (T7, T8, P7, P8), which name the same sites."""
    key = str(ch_name).strip().lower()
    return _CLASSIC_TO_MODERN.get(key, key)


def _band_edges(values):
    if values["l_freq_hz"] >= values["h_freq_hz"]:
        yield ("l_freq_hz", f"give a low edge below h_freq_hz ({_show_hz(values['h_freq_hz'])}); "
                            f"got {_show_hz(values['l_freq_hz'])}: swap or correct the band "
                            "edges")


def _show_hz(value):
    return f"{float(value):g} Hz"


def _channel_names(values):
    channels = values.get("channels")
    if channels is None:
        return
    seen = {}
    for name in channels:
        if not name.strip():
            yield ("channels", f"{name!r} is no channel name; give the names of the channels "
                               "to keep")
            continue
        key = site_key(name)
        if key in seen:
            yield ("channels", f"{seen[key]} and {name} name the same electrode site; keep "
                               "one of them")
        seen[key] = name


@dataclass(frozen=True)
class PrepSettings:
    """How recordings are prepared for analysis; defaults follow common practice. These
    defaults and ``_parameter_constraints`` are the only ones: the study protocol, the
    feature-set form and the worker take theirs from here.

    ``channels`` None keeps the channels present; otherwise the requested set, in this order
    (names matched ignoring case and the classic/modern 10-20 aliases). ``bad_channels`` is
    "interpolate" (spherical spline from the 10-20 template, MNE) or "drop"; ``reference``
    "average" or "as_recorded". ``overlap`` is the share of a window two neighbours share,
    at most 0.9 (``windows.OVERLAP``).
    """

    l_freq_hz: float = 0.5
    h_freq_hz: float = 40.0
    notch: bool = True
    analysis_sfreq_hz: float | None = None
    channels: tuple[str, ...] | None = None
    bad_channels: str = "interpolate"
    reference: str = "average"
    window_s: float = 4.0
    overlap: float = 0.5

    _parameter_constraints: ClassVar[dict] = {
        # The band-pass needs a high-pass edge (0.5 Hz is common practice).
        "l_freq_hz": [Interval(Real, 0, None, closed="neither")],
        "h_freq_hz": [Interval(Real, 0, None, closed="neither")],
        "notch": [InstanceOf(bool, "true or false")],
        "analysis_sfreq_hz": [Interval(Real, 0, None, closed="neither"), None],
        "channels": [ListOf(InstanceOf(str, "channel name"), min_length=1,
                            what="channel names"), None],
        "bad_channels": [Options(BAD_CHANNEL_MODES)],
        "reference": [Options(REFERENCES)],
        "window_s": [WINDOW_S],
        "overlap": [OVERLAP],
    }
    _parameter_checks: ClassVar[tuple] = (_band_edges, _channel_names)

    def __post_init__(self):
        values = {name: getattr(self, name) for name in self._parameter_constraints}
        if isinstance(values["notch"], np.bool_):
            values["notch"] = bool(values["notch"])
        for name in _FLOATS:
            if isinstance(values[name], np.integer | np.floating):
                values[name] = values[name].item()
        if isinstance(values["channels"], list):
            values["channels"] = tuple(values["channels"])
        raise_for(validate(values, type(self), refuse_unknown=False, defaults=False))
        for name in _FLOATS:
            values[name] = float(values[name])
        if values["analysis_sfreq_hz"] is not None:
            values["analysis_sfreq_hz"] = float(values["analysis_sfreq_hz"])
        for name, value in values.items():
            object.__setattr__(self, name, value)

    def as_dict(self) -> dict:
        """JSON-ready dict of every setting (channels as a list)."""
        data = {item.name: getattr(self, item.name) for item in dataclasses.fields(self)}
        if data["channels"] is not None:
            data["channels"] = list(data["channels"])
        return data

    @classmethod
    def from_dict(cls, data: dict) -> PrepSettings:
        """Settings from a dict such as :meth:`as_dict` gives; missing keys take defaults.
        Raises :class:`~cairn_science.params.ParamError` (a ValueError) naming every bad
        or unknown key and what to give."""
        if not isinstance(data, dict):
            raise ValueError(
                f"prep settings must be a mapping of setting names to values, got "
                f"{type(data).__name__}"
            )
        known = [field.name for field in dataclasses.fields(cls)]
        unknown = sorted(set(data) - set(known))
        if unknown:
            raise ValueError(
                f"unknown prep setting(s) {', '.join(map(str, unknown))}; "
                f"known settings are {', '.join(known)}"
            )
        return cls(**data)


_FLOATS = ("l_freq_hz", "h_freq_hz", "window_s", "overlap")


class TooShortError(ValueError):
    """A recording shorter than a filter it needs (the message says how long each is)."""


class ChannelError(ValueError):
    """A recording lacks channels the settings need: requested channels are missing or
    ambiguous, or too few good channels are left."""


@dataclass
class Prepared:
    """A prepared recording: volts at ``sfreq_hz``, kept channels in the requested order."""

    data_v: np.ndarray
    sfreq_hz: float
    ch_names: list[str]
    channel_status: dict
    steps: list[dict]


def bandpass_design(*, sfreq_hz: float, l_freq_hz: float, h_freq_hz: float) -> dict:
    """MNE's default zero-phase FIR band-pass at this rate: its transition bands (as
    documented for ``mne.filter.filter_data``) and filter length in samples."""
    import mne

    nyquist_hz = sfreq_hz / 2.0
    if h_freq_hz >= nyquist_hz:
        raise ValueError(
            f"h_freq_hz ({h_freq_hz} Hz) must be below the recording's Nyquist frequency "
            f"({nyquist_hz} Hz at {sfreq_hz} Hz); lower h_freq_hz"
        )
    l_trans_hz = min(max(0.25 * l_freq_hz, 2.0), l_freq_hz)
    h_trans_hz = min(max(0.25 * h_freq_hz, 2.0), nyquist_hz - h_freq_hz)
    taps = mne.filter.create_filter(
        None, sfreq_hz, l_freq_hz, h_freq_hz, l_trans_bandwidth=l_trans_hz,
        h_trans_bandwidth=h_trans_hz, verbose=False,
    )
    return {
        "l_trans_bandwidth_hz": float(l_trans_hz),
        "h_trans_bandwidth_hz": float(h_trans_hz),
        "filter_length": int(len(taps)),
    }


def _notch_edges(freqs_hz):
    widths = [f * NOTCH_WIDTH_SHARE for f in freqs_hz]
    half_trans = NOTCH_TRANS_BANDWIDTH_HZ / 2.0
    lows = [f - w / 2.0 - half_trans for f, w in zip(freqs_hz, widths, strict=True)]
    highs = [f + w / 2.0 + half_trans for f, w in zip(freqs_hz, widths, strict=True)]
    return widths, lows, highs


def notch_plan(*, sfreq_hz: float, power_line_hz: float, stop_edge_hz: float,
               analysis_sfreq_hz: float) -> tuple[list[float], str | None]:
    """Mains frequency and harmonics to notch: below the band-pass stopband edge (the low-pass
    removes the rest) and below the Nyquist frequency of the input and the analysis rate.
    Returns (freqs_hz, reason why none when empty)."""
    upper_hz = min(stop_edge_hz, sfreq_hz / 2.0, analysis_sfreq_hz / 2.0)
    freqs = []
    harmonic = 1
    while harmonic * power_line_hz < upper_hz:
        freq = harmonic * power_line_hz
        _, _, highs = _notch_edges([freq])
        if highs[0] >= sfreq_hz / 2.0:
            break
        freqs.append(float(freq))
        harmonic += 1
    reason = None
    if not freqs:
        reason = (
            f"mains ({power_line_hz} Hz) is at or above the band-pass stopband edge "
            f"({stop_edge_hz} Hz), which the low-pass already removes"
        )
    return freqs, reason


def _match_requested(requested, ch_names):
    """Index into the recording of each requested channel (case- and alias-insensitive)."""
    by_key = {}
    for index, name in enumerate(ch_names):
        by_key.setdefault(site_key(name), []).append(index)
    picks, missing = [], []
    for name in requested:
        found = by_key.get(site_key(name), [])
        if not found:
            missing.append(name)
        elif len(found) > 1:
            spelled = ", ".join(ch_names[i] for i in found)
            raise ChannelError(
                f"recording has channels {spelled}, which all match the requested {name}; "
                "rename or drop all but one of them in the recording"
            )
        else:
            picks.append(found[0])
    if missing:
        raise ChannelError(
            f"recording lacks channels {', '.join(missing)} that the study asks for "
            f"(recording has {', '.join(ch_names)}); choose channels present at every site or "
            "drop the recording"
        )
    return picks


def _match_bads(bad_channels, ch_names):
    """Recording indices of the bad channels, matched exactly or else by site."""
    indices = set()
    for bad in bad_channels:
        if bad in ch_names:
            indices.add(ch_names.index(bad))
            continue
        found = [i for i, name in enumerate(ch_names) if site_key(name) == site_key(bad)]
        if not found:
            raise ValueError(
                f"bad channel {bad} is not in the recording (recording has "
                f"{', '.join(ch_names)}); pass bad channels by the recording's channel names"
            )
        indices.update(found)
    return indices


def _check_length(n_times, *, sfreq_hz, filter_length, what, advice):
    if filter_length > n_times:
        raise TooShortError(
            f"recording is {n_times} samples ({n_times / sfreq_hz:g} s at {sfreq_hz:g} Hz) "
            f"long, shorter than the {what} ({filter_length} samples, "
            f"{filter_length / sfreq_hz:g} s); {advice}"
        )


def _rate_ratio(from_hz, to_hz):
    ratio = Fraction(to_hz).limit_denominator(1000) / Fraction(from_hz).limit_denominator(1000)
    if max(ratio.numerator, ratio.denominator) > MAX_POLYPHASE_TERM:
        return None
    if abs(from_hz * ratio.numerator / ratio.denominator - to_hz) > 1e-9 * to_hz:
        return None
    return ratio


def _template_montage():
    import mne

    from cairn_science.qc.positions import TEMPLATE_MONTAGES

    available = mne.channels.get_builtin_montages()
    name = next(name for name in TEMPLATE_MONTAGES if name in available)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FutureWarning)  # "standard_1020" before its rename
        return name, mne.channels.make_standard_montage(name)


@functools.cache
def template_origin_m() -> tuple[float, ...]:
    """Centre (head frame, m) of the sphere MNE fits to every electrode of the 10-20
    template. Interpolation uses it whatever channels a recording has, as a sphere fitted
    to a sparse montage's few points can be far off."""
    import mne

    _, montage = _template_montage()
    info = mne.create_info(montage.ch_names, 100.0, ch_types="eeg")
    info.set_montage(montage, verbose=False)
    _, origin, _ = mne.bem.fit_sphere_to_headshape(info, units="m", verbose=False)
    return tuple(float(value) for value in origin)


def _interpolate(data, names, bad_rows):
    """Spherical-spline interpolation of ``bad_rows`` with MNE on the 10-20 template.

    Returns (data, interpolated rows, {dropped row: reason}, montage name).
    """
    import mne

    montage_name, montage = _template_montage()
    spelled = {site_key(name): name for name in montage.ch_names}
    positioned = {}
    for row, name in enumerate(names):
        montage_ch = spelled.get(site_key(name))
        if montage_ch is not None and montage_ch not in positioned.values():
            positioned[row] = montage_ch
    dropped = {row: "no position for it in the 10-20 template"
               for row in bad_rows if row not in positioned}
    candidates = [row for row in bad_rows if row in positioned]
    sources = [row for row in positioned if row not in bad_rows]
    if candidates and len(sources) < MIN_INTERPOLATION_SOURCES:
        reason = (f"only {len(sources)} good channels with a template position remain, "
                  f"fewer than the {MIN_INTERPOLATION_SOURCES} interpolation needs")
        dropped.update({row: reason for row in candidates})
        candidates = []
    if not candidates:
        return data, [], dropped, montage_name
    rows = sorted(sources + candidates)
    info = mne.create_info([positioned[row] for row in rows], 1.0, ch_types="eeg")
    raw = mne.io.RawArray(data[rows], info, verbose=False)
    raw.set_montage(montage, on_missing="ignore", verbose=False)
    raw.info["bads"] = [positioned[row] for row in candidates]
    raw.interpolate_bads(reset_bads=True, origin=template_origin_m(), verbose=False)
    out = data.copy()
    out[rows] = raw.get_data()
    return out, candidates, dropped, montage_name


def prepare(data_v, *, sfreq_hz: float, ch_names, power_line_hz: float | None,
            bad_channels, settings: PrepSettings) -> Prepared:
    """Prepare one recording for analysis.

    ``data_v`` is (n_channels, n_times) in volts at ``sfreq_hz`` with ``ch_names`` as
    recorded; ``power_line_hz`` the recording's mains (None: unknown, no notch);
    ``bad_channels`` names of the recording's bad channels; ``settings`` a
    :class:`PrepSettings`. Steps: pick channels, notch, band-pass, resample, bad channels,
    re-reference; every step, done or skipped, is recorded with its parameters.
    """
    import mne
    from scipy import signal

    data = np.asarray(data_v, dtype=float)
    ch_names = [str(name) for name in ch_names]
    sfreq_hz = float(sfreq_hz)
    if data.ndim != 2 or data.shape[0] != len(ch_names):
        raise ValueError(
            f"data_v must be (n_channels, n_times) with one row per name in ch_names; got "
            f"shape {data.shape} for {len(ch_names)} names"
        )
    if not sfreq_hz > 0:
        raise ValueError(f"sfreq_hz must be positive, got {sfreq_hz}")
    if power_line_hz is not None and not power_line_hz > 0:
        raise ValueError(f"power_line_hz must be positive or None, got {power_line_hz}")
    n_times = data.shape[1]
    steps = []

    # Pick channels.
    bad_rec = _match_bads(list(bad_channels or ()), ch_names)
    if settings.channels is None:
        picks = list(range(len(ch_names)))
        names = list(ch_names)
    else:
        picks = _match_requested(settings.channels, ch_names)
        names = list(settings.channels)
    left_out = [ch_names[i] for i in range(len(ch_names)) if i not in picks]
    steps.append({
        "step": "pick_channels", "applied": True,
        "requested": None if settings.channels is None else list(settings.channels),
        "matching": "case-insensitive; T3=T7, T4=T8, T5=P7, T6=P8",
        "recorded_as": {name: ch_names[i] for name, i in zip(names, picks, strict=True)},
        "left_out": left_out,
        "bad_left_out": [ch_names[i] for i in sorted(bad_rec) if i not in picks],
    })
    data = data[picks]
    bad_rows = [row for row, index in enumerate(picks) if index in bad_rec]
    not_finite = [names[row] for row in range(len(names))
                  if row not in bad_rows and not np.all(np.isfinite(data[row]))]
    if not_finite:
        raise ValueError(
            f"channels {', '.join(not_finite)} hold NaN or infinite samples; mark them bad "
            "or repair the recording"
        )
    data[bad_rows] = np.nan_to_num(data[bad_rows], nan=0.0, posinf=0.0, neginf=0.0)

    # Designs and checks before any work.
    design = bandpass_design(sfreq_hz=sfreq_hz, l_freq_hz=settings.l_freq_hz,
                             h_freq_hz=settings.h_freq_hz)
    stop_edge_hz = settings.h_freq_hz + design["h_trans_bandwidth_hz"]
    analysis_hz = sfreq_hz if settings.analysis_sfreq_hz is None else settings.analysis_sfreq_hz
    if analysis_hz < 2.0 * stop_edge_hz:
        raise ValueError(
            f"analysis_sfreq_hz ({analysis_hz:g} Hz) is below twice the band-pass stopband "
            f"edge (2 x ({settings.h_freq_hz:g} + {design['h_trans_bandwidth_hz']:g}) = "
            f"{2.0 * stop_edge_hz:g} Hz), so the pass-band would alias; raise "
            f"analysis_sfreq_hz to at least {2.0 * stop_edge_hz:g} Hz or lower h_freq_hz"
        )
    _check_length(n_times, sfreq_hz=sfreq_hz, filter_length=design["filter_length"],
                  what="band-pass filter",
                  advice="use a longer recording or raise l_freq_hz (a shorter filter)")
    notch_freqs, notch_skip = [], None
    if not settings.notch:
        notch_skip = "notch is off in the settings"
    elif power_line_hz is None:
        notch_skip = "the recording's mains frequency is unknown"
    else:
        notch_freqs, notch_skip = notch_plan(
            sfreq_hz=sfreq_hz, power_line_hz=float(power_line_hz),
            stop_edge_hz=stop_edge_hz, analysis_sfreq_hz=analysis_hz)
    if notch_freqs:
        widths, lows, highs = _notch_edges(notch_freqs)
        notch_length = len(mne.filter.create_filter(
            None, sfreq_hz, highs, lows, l_trans_bandwidth=NOTCH_TRANS_BANDWIDTH_HZ / 2.0,
            h_trans_bandwidth=NOTCH_TRANS_BANDWIDTH_HZ / 2.0, verbose=False))
        _check_length(n_times, sfreq_hz=sfreq_hz, filter_length=notch_length,
                      what="notch filter", advice="use a longer recording or turn notch off")

    # Notch.
    if notch_freqs:
        data = mne.filter.notch_filter(
            data, sfreq_hz, notch_freqs, method="fir", phase="zero", fir_window="hamming",
            fir_design="firwin", verbose=False)
        steps.append({
            "step": "notch", "applied": True, "freqs_hz": notch_freqs,
            "notch_widths_hz": [float(w) for w in widths],
            "trans_bandwidth_hz": NOTCH_TRANS_BANDWIDTH_HZ, "method": "fir", "phase": "zero",
            "fir_window": "hamming", "fir_design": "firwin", "filter_length": int(notch_length),
            "power_line_hz": float(power_line_hz),
        })
    else:
        steps.append({"step": "notch", "applied": False, "reason": notch_skip,
                      "power_line_hz": None if power_line_hz is None else float(power_line_hz)})

    # Band-pass.
    data = mne.filter.filter_data(
        data, sfreq_hz, settings.l_freq_hz, settings.h_freq_hz,
        l_trans_bandwidth=design["l_trans_bandwidth_hz"],
        h_trans_bandwidth=design["h_trans_bandwidth_hz"], method="fir", phase="zero",
        fir_window="hamming", fir_design="firwin", verbose=False)
    steps.append({
        "step": "bandpass", "applied": True, "l_freq_hz": settings.l_freq_hz,
        "h_freq_hz": settings.h_freq_hz, "method": "fir", "phase": "zero",
        "fir_window": "hamming", "fir_design": "firwin", "pad": "reflect_limited", **design,
        # Half a filter at each end carries the filter's edge transient.
        "edge_transient_s": (design["filter_length"] // 2) / sfreq_hz,
    })

    # Resample.
    if analysis_hz == sfreq_hz:
        steps.append({"step": "resample", "applied": False,
                      "reason": "the analysis rate is the recording's rate",
                      "sfreq_hz": sfreq_hz})
    else:
        ratio = _rate_ratio(sfreq_hz, analysis_hz)
        if ratio is not None:
            data = signal.resample_poly(data, ratio.numerator, ratio.denominator, axis=-1,
                                        window=("kaiser", 5.0))
            steps.append({"step": "resample", "applied": True, "method": "polyphase",
                          "from_hz": sfreq_hz, "to_hz": analysis_hz,
                          "up": ratio.numerator, "down": ratio.denominator,
                          "window": ["kaiser", 5.0], "padtype": "constant"})
        else:
            data = mne.filter.resample(data, up=analysis_hz, down=sfreq_hz, method="fft",
                                       verbose=False)
            steps.append({"step": "resample", "applied": True, "method": "fft",
                          "from_hz": sfreq_hz, "to_hz": analysis_hz,
                          "ratio": analysis_hz / sfreq_hz, "window": "boxcar",
                          "pad": "reflect_limited"})

    # Bad channels.
    status = {name: "good" for name in names}
    dropped = {}
    if not bad_rows:
        steps.append({"step": "bad_channels", "applied": False,
                      "reason": "no bad channels among the kept channels"})
    elif settings.bad_channels == "drop":
        dropped = {row: "bad channel, dropped as the settings ask" for row in bad_rows}
        steps.append({"step": "bad_channels", "applied": True, "mode": "drop",
                      "dropped": [names[row] for row in bad_rows],
                      "reasons": {names[row]: dropped[row] for row in bad_rows}})
    else:
        data, done, dropped, montage_name = _interpolate(data, names, bad_rows)
        for row in done:
            status[names[row]] = "interpolated"
        steps.append({
            "step": "bad_channels", "applied": True, "mode": "interpolate",
            "method": "spherical_spline", "library": "mne.io.Raw.interpolate_bads",
            "montage": montage_name, "mne_mode": "accurate",
            "origin_m": list(template_origin_m()),
            "origin_from": "sphere fitted to every electrode of the template",
            "interpolated": [names[row] for row in done],
            "dropped": [names[row] for row in sorted(dropped)],
            "reasons": {names[row]: reason for row, reason in sorted(dropped.items())},
        })
    for row in dropped:
        status[names[row]] = "dropped"
    keep = [row for row in range(len(names)) if row not in dropped]
    if not keep:
        raise ChannelError(
            f"no channels are left: every kept channel ({', '.join(names)}) is bad and "
            "dropped; mark fewer channels bad or drop the recording"
        )
    data = data[keep]
    kept_names = [names[row] for row in keep]

    # Re-reference.
    if settings.reference == "average":
        if len(keep) < 2:
            raise ChannelError(
                f"reference 'average' needs at least 2 channels, only {', '.join(kept_names)} "
                "is left; use reference 'as_recorded' or keep more channels"
            )
        data = data - data.mean(axis=0, keepdims=True)
        steps.append({"step": "reference", "applied": True, "reference": "average",
                      "channels": kept_names})
    else:
        steps.append({"step": "reference", "applied": False, "reference": "as_recorded",
                      "reason": "the settings keep the recorded reference"})

    return Prepared(data_v=np.ascontiguousarray(data), sfreq_hz=float(analysis_hz),
                    ch_names=kept_names, channel_status=status, steps=steps)
