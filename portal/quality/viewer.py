"""The signal viewer of a recording's quality page: one page of the traces (start and span in
seconds), decimated on the server with an anti-alias filter for display, the effective bad
channels (checks' flags plus people's decisions) drawn in red and the rejected segments
shaded, drawn by matplotlib (Agg) as a PNG of fixed size and cached on disk.

Nothing is filtered unless a display filter is asked for; its name is written on the image,
with the display rate.
"""

import io
import os
import threading
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from cairn_science.canonical_json import canonical_sha256

VIEW_VERSION = "1"
MAX_SPAN_S = 60.0
MIN_SPAN_S = 1.0
SPANS_S = (2, 5, 10, 20, 30, 60)
DEFAULT = {"start": 0.0, "span": 10.0, "gain": 50.0, "filter": "none"}
MIN_GAIN_UV, MAX_GAIN_UV = 1.0, 10000.0
GAINS_UV = (5, 10, 20, 50, 100, 200, 500, 1000)
#: Display filters: name -> (words shown, low edge Hz, high edge Hz) for mne.filter.filter_data.
FILTERS = {
    "none": ("no filter", None, None),
    "hp1": ("display high-pass 1 Hz", 1.0, None),
    "bp1-40": ("display band-pass 1–40 Hz", 1.0, 40.0),
}
#: Samples kept across the figure's width at most (about two per pixel column of 1000 px).
TARGET_POINTS = 2000
#: scipy's advice: decimate by at most 13 in one call (scipy.signal.decimate documentation).
MAX_STEP = 13
#: Seconds read on each side of the page before a display filter, so its edges settle.
FILTER_PAD_S = 5.0
WIDTH_IN, HEIGHT_IN, DPI = 10.0, 6.0, 100
GOOD, BAD, SEGMENT = "#2f3e36", "#b3261e", "#f3d6d3"


class ViewError(ValueError):
    """A parameter of the viewer out of range; the message says which and what to give."""


@dataclass(frozen=True)
class ViewParams:
    start_s: float
    span_s: float
    gain_uv: float
    filter: str

    def key(self):
        return {"start": self.start_s, "span": self.span_s, "gain": self.gain_uv,
                "filter": self.filter}

    def query(self, **changes):
        values = {**self.key(), **changes}
        return "&".join(f"{k}={_plain(v)}" for k, v in values.items())


def _plain(value):
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


def _number(query, name, default):
    raw = query.get(name, "")
    if raw in ("", None):
        return float(default)
    try:
        value = float(raw)
    except (TypeError, ValueError):
        raise ViewError(f"{name}: {raw!r} is not a number; give a number of "
                        f"{'seconds' if name != 'gain' else 'µV per division'}.") from None
    if not np.isfinite(value):
        raise ViewError(f"{name}: give a finite number.")
    return value


def parse_params(query, duration_s):
    """The viewer's parameters from a query (start and span in s, gain in µV per division,
    filter by name), checked against the recording's ``duration_s``; ViewError names the
    parameter and the range it must lie in."""
    start = _number(query, "start", DEFAULT["start"])
    span = _number(query, "span", DEFAULT["span"])
    gain = _number(query, "gain", DEFAULT["gain"])
    name = query.get("filter") or DEFAULT["filter"]
    if not MIN_SPAN_S <= span <= MAX_SPAN_S:
        raise ViewError(f"span: {_plain(span)} s is out of range; give {_plain(MIN_SPAN_S)} to "
                        f"{_plain(MAX_SPAN_S)} seconds.")
    if duration_s and not 0 <= start < duration_s:
        raise ViewError(f"start: {_plain(start)} s is outside the recording; give 0 to "
                        f"{duration_s:.0f} seconds (the recording lasts {duration_s:.1f} s).")
    if start < 0:
        raise ViewError("start: give 0 or more seconds.")
    if not MIN_GAIN_UV <= gain <= MAX_GAIN_UV:
        raise ViewError(f"gain: {_plain(gain)} µV per division is out of range; give "
                        f"{_plain(MIN_GAIN_UV)} to {_plain(MAX_GAIN_UV)}.")
    if name not in FILTERS:
        raise ViewError(f"filter: {name!r} is not offered; give one of {', '.join(FILTERS)}.")
    return ViewParams(start_s=round(start, 3), span_s=round(span, 3), gain_uv=round(gain, 3),
                      filter=name)


def decimation_step(n_samples):
    """The whole-number factor by which a page of ``n_samples`` is decimated for display: at
    most :data:`MAX_STEP`, so that at most about :data:`TARGET_POINTS` samples remain."""
    return int(min(MAX_STEP, max(1, n_samples // TARGET_POINTS)))


@dataclass
class Display:
    """Everything the image shows, in drawing order: times (s), one trace per channel in µV
    with its status, the rejected segments within the page, and the words of the caption."""

    times_s: np.ndarray
    traces: list
    segments: list
    start_s: float
    stop_s: float
    gain_uv: float
    sfreq_hz: float
    display_sfreq_hz: float
    step: int
    filter_words: str
    notes: list = field(default_factory=list)

    @property
    def bad_channels(self):
        return [t["name"] for t in self.traces if t["status"] == "bad"]


def page_samples(params, sfreq_hz, n_times):
    """(first, last, lo, hi): the page's samples [first, last) of a recording of ``n_times``
    samples, and the samples [lo, hi) to read for it (the page, with :data:`FILTER_PAD_S` of
    signal on each side when a display filter is asked for)."""
    first = min(int(round(params.start_s * sfreq_hz)), max(n_times - 1, 0))
    last = min(n_times, first + int(round(params.span_s * sfreq_hz)))
    if FILTERS[params.filter][1:] == (None, None):
        return first, last, first, last
    pad = int(round(FILTER_PAD_S * sfreq_hz))
    return first, last, max(0, first - pad), min(n_times, last + pad)


def build_display(data_v, ch_names, sfreq_hz, params, *, channels=None, segments=(),
                  offset=0, n_times=None):
    """What one page shows, from ``data_v`` (channels × samples, in volts as mne gives them)
    holding the recording's samples from ``offset`` on (all of a recording of ``n_times``
    samples, or at least [lo, hi) of :func:`page_samples`): the page [start, start + span)
    cut out, the display filter applied (on the padded samples, the padding then cut away),
    then decimated by :func:`decimation_step` with scipy's anti-alias filter
    (``scipy.signal.decimate``, its default order-8 Chebyshev type I, forwards and backwards).
    ``channels``: {name: {"status", "by"}} (the effective verdict); ``segments``: the rejected
    segments (onset_s, duration_s, reasons) of the quality result."""
    from scipy.signal import decimate

    channels = channels or {}
    n_times = offset + data_v.shape[1] if n_times is None else n_times
    first, last, lo, hi = page_samples(params, sfreq_hz, n_times)
    if lo < offset or hi > offset + data_v.shape[1]:
        raise ValueError(f"samples {lo}-{hi} are needed, {offset}-"
                         f"{offset + data_v.shape[1]} were given")
    words, l_freq, h_freq = FILTERS[params.filter]
    if l_freq is None and h_freq is None:
        page = data_v[:, first - offset:last - offset]
    else:
        import mne

        filtered = mne.filter.filter_data(np.asarray(data_v[:, lo - offset:hi - offset],
                                                     dtype=float), sfreq_hz,
                                          l_freq, h_freq, verbose="ERROR")
        page = filtered[:, first - lo:last - lo]
    page = np.asarray(page, dtype=float) * 1e6  # µV
    step = decimation_step(page.shape[1])
    notes = []
    if step > 1 and page.shape[1] > 27 * step:  # decimate's filtfilt needs enough samples
        page = decimate(page, step, axis=1)
        display_sfreq = sfreq_hz / step
    else:
        step, display_sfreq = 1, sfreq_hz
    times = first / sfreq_hz + np.arange(page.shape[1]) / display_sfreq
    traces = []
    for i, name in enumerate(ch_names):
        info = channels.get(name, {})
        traces.append({"name": name, "values_uv": page[i], "status": info.get("status", "good"),
                       "by": info.get("by", "")})
    start_s, stop_s = first / sfreq_hz, last / sfreq_hz
    shown = []
    for segment in segments:
        onset, end = segment["onset_s"], segment["onset_s"] + segment["duration_s"]
        if end > start_s and onset < stop_s:
            shown.append({"onset_s": max(onset, start_s), "end_s": min(end, stop_s),
                          "reasons": list(segment.get("reasons", []))})
    if last - first < int(round(params.span_s * sfreq_hz)):
        notes.append("the recording ends within this page")
    return Display(times_s=times, traces=traces, segments=shown, start_s=start_s,
                   stop_s=stop_s, gain_uv=params.gain_uv, sfreq_hz=sfreq_hz,
                   display_sfreq_hz=display_sfreq, step=step, filter_words=words, notes=notes)


def draw(display):
    """The PNG bytes of ``display``: one trace per channel, one division (the gain in µV)
    between neighbouring baselines, bad channels in red and named so, rejected time shaded."""
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    figure = Figure(figsize=(WIDTH_IN, HEIGHT_IN), dpi=DPI)
    figure.set_layout_engine("constrained")
    axes = figure.add_subplot()
    n = len(display.traces)
    for segment in display.segments:
        axes.axvspan(segment["onset_s"], segment["end_s"], color=SEGMENT, zorder=0, lw=0)
    for i, trace in enumerate(display.traces):
        baseline = n - 1 - i
        bad = trace["status"] == "bad"
        axes.plot(display.times_s, baseline + trace["values_uv"] / display.gain_uv,
                  color=BAD if bad else GOOD, lw=0.6, zorder=2)
    axes.set_yticks(range(n))
    axes.set_yticklabels([f"{t['name']} (bad)" if t["status"] == "bad" else t["name"]
                          for t in reversed(display.traces)], fontsize=7)
    for label, trace in zip(axes.get_yticklabels(), reversed(display.traces), strict=True):
        if trace["status"] == "bad":
            label.set_color(BAD)
    axes.set_ylim(-1, max(n, 1))
    axes.set_xlim(display.start_s, display.stop_s)
    axes.set_xlabel("time (s)")
    axes.set_title(
        f"{display.start_s:g}–{display.stop_s:g} s · {display.gain_uv:g} µV per division · "
        f"{display.filter_words} · shown at {display.display_sfreq_hz:g} Hz "
        f"(recorded at {display.sfreq_hz:g} Hz)"
        + (f" · {'; '.join(display.notes)}" if display.notes else ""),
        fontsize=8, loc="left")
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", metadata={"Software": None})
    return buffer.getvalue()


def cache_key(sha256, params, channels, segments):
    """The rendered page's key: the recording's file, the page's parameters, and what is
    marked on it (a person setting a channel bad draws a new image)."""
    marks = {"bad": sorted(n for n, c in (channels or {}).items() if c.get("status") == "bad"),
             "segments": [[s["onset_s"], s["duration_s"]] for s in segments]}
    payload = {"v": VIEW_VERSION, "sha256": sha256, **params.key(), "marks": marks}
    return canonical_sha256(payload)


def cached_png(key, render):
    """The PNG stored under ``key`` in VAR_DIR/signal, drawn by ``render()`` when absent."""
    from django.conf import settings

    folder = Path(settings.VAR_DIR) / "signal"
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{key}.png"
    if path.exists():
        return path.read_bytes()
    png = render()
    tmp = path.with_suffix(f".{os.getpid()}.{threading.get_ident()}.tmp")  # one per writer
    tmp.write_bytes(png)
    tmp.replace(path)
    return png


def page_links(params, duration_s):
    """Query strings of the neighbouring pages and the offered spans and gains."""
    span = params.span_s
    previous = max(0.0, params.start_s - span) if params.start_s > 0 else None
    following = params.start_s + span if params.start_s + span < (duration_s or 0) else None
    return {
        "previous": params.query(start=previous) if previous is not None else None,
        "next": params.query(start=following) if following is not None else None,
        "spans": [(s, params.query(span=float(s))) for s in SPANS_S],
        "gains": [(g, params.query(gain=float(g))) for g in GAINS_UV],
        "more_gain": params.query(gain=max(MIN_GAIN_UV, params.gain_uv / 2)),
        "less_gain": params.query(gain=min(MAX_GAIN_UV, params.gain_uv * 2)),
    }
