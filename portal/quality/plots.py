"""Server-side plots of a QC result (SVG), cached on disk by the hash of what they show."""

import hashlib
import io
import json
from pathlib import Path

from django.conf import settings

PLOT_VERSION = "1"
KINDS = ("spectrum", "sensors", "timeline")
GOOD, BAD, SITE_BAD = "#5b6b62", "#b3261e", "#8a5a00"
BAND_SHADES = ("#ece9df", "#f7f5ef")


def _cache_path(key):
    folder = Path(settings.VAR_DIR) / "plots"
    folder.mkdir(parents=True, exist_ok=True)
    return folder / f"{key}.svg"


def render(run, kind):
    """The SVG bytes of one plot of ``run``; drawn once per distinct content."""
    protocol = _protocol(run)
    payload = {"kind": kind, "v": PLOT_VERSION, "result": run.result,
               "bands": protocol["bands"], "mains": run.result.get("power_line_hz")}
    key = hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()
    path = _cache_path(key)
    if path.exists():
        return path.read_bytes()
    svg = DRAW[kind](run.result, protocol)
    tmp = path.with_suffix(".tmp")
    tmp.write_bytes(svg)
    tmp.replace(path)
    return svg


def _protocol(run):
    from portal.studies.models import current_protocol

    study = run.site.studies.order_by("pk").first()
    return current_protocol(study).data


def _figure(width_in, height_in):
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    figure = Figure(figsize=(width_in, height_in), dpi=100)
    figure.set_layout_engine("constrained")
    return figure


def _svg(figure):
    buffer = io.BytesIO()
    figure.savefig(buffer, format="svg", metadata={"Date": None})
    return buffer.getvalue()


def _status(info):
    if info["status"] != "bad":
        return GOOD
    return SITE_BAD if info.get("marked_by_site") else BAD


def draw_spectrum(result, protocol):
    """Power spectrum per channel in decibels (a log scale), analysis bands shaded, the mains
    frequency marked, bad channels drawn on top and named."""
    figure = _figure(8, 4)
    axes = figure.add_subplot()
    psd = result.get("psd") or {}
    freqs = psd.get("freqs_hz", [])
    for i, band in enumerate(protocol["bands"]):
        axes.axvspan(band["l_freq_hz"], band["h_freq_hz"], color=BAND_SHADES[i % 2], zorder=0)
        axes.text((band["l_freq_hz"] + band["h_freq_hz"]) / 2, 1.0, band["name"],
                  transform=axes.get_xaxis_transform(), ha="center", va="bottom", fontsize=8)
    for name, values in (psd.get("channels") or {}).items():
        info = result["channels"].get(name, {"status": "good"})
        bad = info["status"] == "bad"
        points = [(f, v) for f, v in zip(freqs, values, strict=False) if v is not None]
        axes.plot([f for f, _ in points], [v for _, v in points], color=_status(info),
                  linewidth=1.4 if bad else 0.6, alpha=1.0 if bad else 0.5,
                  label=name if bad else None, zorder=3 if bad else 2)
    mains = result.get("power_line_hz")
    if mains:
        axes.axvline(mains, color="#1f2421", linestyle="--", linewidth=0.8)
        axes.text(mains, 0.02, f" mains {mains:g} Hz", transform=axes.get_xaxis_transform(),
                  fontsize=8)
    axes.set_xlabel("frequency (Hz)")
    axes.set_ylabel(f"power ({psd.get('unit', 'dB')})")
    if any(c["status"] == "bad" for c in result["channels"].values()):
        axes.legend(title="bad channels", fontsize=7, title_fontsize=8, loc="upper right")
    return _svg(figure)


def draw_sensors(result, protocol):
    """Sensors seen from above, bad ones marked, with their reasons in the legend."""
    import numpy as np

    figure = _figure(5.5, 5)
    axes = figure.add_subplot()
    positions = result.get("positions") or {}
    names = [n for n in result["channels"] if n in positions]
    if names:
        xy = np.array([positions[n][:2] for n in names], dtype=float)
        radius = max(np.abs(xy).max(), 1e-6) * 1.15
        from matplotlib.patches import Circle

        axes.add_patch(Circle((0, 0), radius, fill=False, color="#8d918c"))
        axes.plot([-0.1 * radius, 0, 0.1 * radius], [radius, 1.1 * radius, radius],
                  color="#8d918c")
        for (x, y), name in zip(xy, names, strict=True):
            info = result["channels"][name]
            axes.scatter([x], [y], s=90, color=_status(info), zorder=3)
            axes.annotate(name, (x, y), textcoords="offset points", xytext=(0, 7),
                          ha="center", fontsize=7)
        lines = [f"{n}: {', '.join(r['words'] for r in result['channels'][n]['reasons'])}"
                 for n in names if result["channels"][n]["status"] == "bad"]
        if lines:
            axes.text(0, -1.2 * radius, "\n".join(lines), ha="center", va="top", fontsize=7)
        axes.set_xlim(-1.3 * radius, 1.3 * radius)
        axes.set_ylim(-1.3 * radius - 0.08 * radius * len(lines), 1.25 * radius)
    else:
        axes.text(0.5, 0.5, "no sensor positions known", ha="center", va="center")
    axes.set_aspect("equal")
    axes.axis("off")
    return _svg(figure)


def draw_timeline(result, protocol):
    """The recording as a bar, rejected segments marked with what was wrong."""
    figure = _figure(8, 1.6)
    axes = figure.add_subplot()
    duration = result.get("duration_s") or max(
        [s["onset_s"] + s["duration_s"] for s in result.get("segments", [])] + [1.0])
    axes.broken_barh([(0, duration)], (0, 1), color="#dfe7e1")
    for segment in result.get("segments", []):
        axes.broken_barh([(segment["onset_s"], segment["duration_s"])], (0, 1), color=BAD)
    axes.set_xlim(0, duration)
    axes.set_yticks([])
    axes.set_xlabel("time (s)")
    share = 100 * result.get("rejected_share", 0.0)
    axes.set_title(f"{share:.1f}% of the time rejected", fontsize=9, loc="left")
    return _svg(figure)


DRAW = {"spectrum": draw_spectrum, "sensors": draw_sensors, "timeline": draw_timeline}
