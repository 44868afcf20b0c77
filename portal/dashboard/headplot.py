"""Head plots for the study overview: a top view of the scalp, one dot per channel, coloured
by the share of quality checks that flagged it, rendered as inline SVG.

Pure (no Django): names, counts and a label in, an SVG string out, the same for the same input.
Positions come from the 10-20 template in ``cairn_science.qc.positions``, projected azimuthally
equidistant about the centre of the least-squares sphere through all template positions.
"""

import functools
import hashlib
import html
import math
import operator
import re
from collections.abc import Mapping

import numpy as np

# Colour ramp, share 0 → 1: a light warm grey through sand and amber to a deep brick red.
RAMP = (
    (0.00, (0xE8, 0xE6, 0xE1)),
    (0.25, (0xF2, 0xCF, 0x86)),
    (0.50, (0xE3, 0x8A, 0x3A)),
    (0.75, (0xB9, 0x45, 0x1F)),
    (1.00, (0x6B, 0x15, 0x0C)),
)
NOT_CHECKED = "#8d9399"  # cool mid grey, drawn with a dashed rim so it reads without colour
INK = "#222222"
OUTLINE = "#555555"
LEGEND_SHARES = (0.0, 0.25, 0.5, 0.75, 1.0)
LEGEND_LABELS = {0.0: "0 %", 0.5: "50 %", 1.0: "100 %"}

MIN_SIZE_PX, MAX_SIZE_PX = 120, 2000
# In units of the head radius: room for the nose, and largest / smallest dot.
HEAD_EXTENT = 1.16
DOT_MAX, DOT_MIN = 0.075, 0.035
UNPLACED_MAX_LINES = 3
UNPLACED_NAME_CHARS = 20

# Characters XML 1.0 cannot carry even escaped (controls, lone surrogates, U+FFFE/U+FFFF).
_NOT_XML = re.compile("[^\t\n\r\x20-\ud7ff\ue000-\ufffd\U00010000-\U0010ffff]")


# --- geometry ---------------------------------------------------------------------------


@functools.cache
def _head_centre():
    """Centre (m) of the least-squares sphere through every template position."""
    # Imported here so that importing this module does not load mne in the web process.
    from cairn_science.qc.positions import fit_sphere, template_positions

    points = np.array(list(template_positions().values()), dtype=float)
    centre, _ = fit_sphere(points)
    return centre


@functools.lru_cache(maxsize=4096)
def _project(ch_name):
    from cairn_science.qc.positions import template_position

    position = template_position(ch_name)
    if position is None:
        return None
    direction = np.asarray(position, dtype=float) - _head_centre()
    length = float(np.linalg.norm(direction))
    if not np.isfinite(length) or length == 0.0:
        return None
    theta = math.acos(max(-1.0, min(1.0, direction[2] / length)))
    horizontal = math.hypot(direction[0], direction[1])
    if horizontal == 0.0:
        return (0.0, 0.0)
    radius = theta / (math.pi / 2)
    return (radius * direction[0] / horizontal, radius * direction[1] / horizontal)


def project(ch_name):
    """Position (x, y) of a 10-20 electrode name in the unit disc, or None if unknown.

    Azimuthal equidistant projection from the vertex: the radius is the angle from +z about
    the template's sphere centre over 90°, so the Fpz-T7-Oz-T8 ring lies near radius 1;
    +x points to the right ear, +y to the nose.
    """
    if not isinstance(ch_name, str):
        raise TypeError(f"ch_name must be a channel name (str), got {type(ch_name).__name__}")
    return _project(ch_name)


# --- colours and words ------------------------------------------------------------------


def share_colour(share):
    """Hex colour of a share in [0, 1] on the ramp (linear between its stops)."""
    share = min(1.0, max(0.0, float(share)))
    for (low, low_rgb), (high, high_rgb) in zip(RAMP, RAMP[1:], strict=False):
        if share <= high:
            t = (share - low) / (high - low)
            rgb = (round(a + (b - a) * t) for a, b in zip(low_rgb, high_rgb, strict=True))
            return "#" + "".join(f"{value:02x}" for value in rgb)
    return "#" + "".join(f"{value:02x}" for value in RAMP[-1][1])


def _percent(flagged, checked):
    value = 100.0 * flagged / checked
    text = f"{value:.1f}".removesuffix(".0")
    if text == "0" and flagged > 0:
        return "< 0.1 %"
    if text == "100" and flagged < checked:
        return "> 99.9 %"
    return f"{text} %"


def _describe(name, flagged, checked):
    if checked == 0:
        return f"{name}: not checked"
    checks = "check" if checked == 1 else "checks"
    return f"{name}: flagged in {flagged} of {checked} {checks} ({_percent(flagged, checked)})"


def xml_text(text):
    """Text safe inside XML content and double-quoted attributes."""
    return html.escape(_NOT_XML.sub("\ufffd", text), quote=True)


def svg_number(value):
    """A coordinate as SVG text: at most two decimals, no trailing zeros."""
    return f"{value:.2f}".rstrip("0").rstrip(".")


_xml, _num = xml_text, svg_number  # short names for the drawing code below


# --- input ------------------------------------------------------------------------------


def _count(value, name, what):
    if isinstance(value, bool):
        raise ValueError(f"shares[{name!r}]: times {what} must be a whole number, got {value!r}")
    try:
        number = operator.index(value)
    except TypeError:
        raise ValueError(
            f"shares[{name!r}]: times {what} must be a whole number, got {value!r}"
        ) from None
    if number < 0:
        raise ValueError(f"shares[{name!r}]: times {what} must not be negative, got {number}")
    return number


def _checked_shares(shares):
    if not isinstance(shares, Mapping):
        raise ValueError(
            "shares must map channel names to (times flagged, times checked), "
            f"got {type(shares).__name__}"
        )
    rows = []
    for name, value in shares.items():
        if not isinstance(name, str):
            raise ValueError(f"shares: channel names must be strings, got {name!r}")
        if isinstance(value, (str, bytes)) or not hasattr(value, "__len__") or len(value) != 2:
            raise ValueError(
                f"shares[{name!r}]: expected (times flagged, times checked), got {value!r}"
            )
        flagged = _count(value[0], name, "flagged")
        checked = _count(value[1], name, "checked")
        if flagged > checked:
            raise ValueError(
                f"shares[{name!r}]: times flagged ({flagged}) exceeds times checked "
                f"({checked}); pass (flagged, checked) with flagged <= checked"
            )
        rows.append((name, flagged, checked))
    rows.sort(key=lambda row: (row[0].casefold(), row[0]))
    return rows


# --- drawing ----------------------------------------------------------------------------


def _dot_radius(points):
    """Dot radius (head radii): a little under half the typical nearest-neighbour distance."""
    if len(points) < 2:
        return DOT_MAX
    xy = np.asarray(points, dtype=float)
    distance = np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1))
    np.fill_diagonal(distance, np.inf)
    typical = float(np.median(distance.min(axis=1)))
    return min(DOT_MAX, max(DOT_MIN, 0.42 * typical))


def _wrap(words, width_chars, max_lines):
    """Lines of comma-joined words, at most ``max_lines``; the rest counted on the last."""
    lines, current = [], ""
    for index, word in enumerate(words):
        candidate = f"{current}, {word}" if current else word
        if current and len(candidate) > width_chars:
            lines.append(current + ",")
            if len(lines) == max_lines:
                lines[-1] = f"{current} … +{len(words) - index} more"
                return lines
            current = word
        else:
            current = candidate
    if current:
        lines.append(current)
    return lines


def _short(name):
    return name if len(name) <= UNPLACED_NAME_CHARS else name[: UNPLACED_NAME_CHARS - 1] + "…"


def head_svg(shares, *, label, size_px=220):
    """Inline SVG head plot of how often each channel was flagged at one site.

    ``shares`` maps channel name -> (times flagged, times checked); ``label`` names the
    site. Channels without a template position are listed under the head.
    """
    if not isinstance(label, str) or not label.strip():
        raise ValueError("label must name what the plot shows (e.g. the site), got an empty value")
    if isinstance(size_px, bool) or not isinstance(size_px, int):
        raise ValueError(f"size_px must be a whole number of pixels, got {size_px!r}")
    if not MIN_SIZE_PX <= size_px <= MAX_SIZE_PX:
        raise ValueError(f"size_px must be between {MIN_SIZE_PX} and {MAX_SIZE_PX}, got {size_px}")
    rows = _checked_shares(shares)

    placed, unplaced = [], []
    for name, flagged, checked in rows:
        xy = project(name)
        (unplaced if xy is None else placed).append((name, flagged, checked, xy))

    dot = _dot_radius([row[3] for row in placed])
    reach = max((math.hypot(*row[3]) for row in placed), default=0.0) + dot + 0.02
    extent = max(HEAD_EXTENT, reach)
    pad = 4.0
    head_r = (size_px / 2 - pad) / extent
    cx = cy = size_px / 2
    font = max(9, round(size_px * 0.045))
    line = font * 1.3

    def at(x, y):
        return _num(cx + x * head_r), _num(cy - y * head_r)

    digest = hashlib.sha256(repr((label, size_px, rows)).encode("utf-8", "surrogatepass"))
    title_id = f"headplot-{digest.hexdigest()[:12]}"
    title = f"{label}: share of checks flagging each channel"

    body = [f'<title id="{title_id}">{_xml(title)}</title>']
    # Head outline, nose (pointing up, +y) and ears (at ±x).
    body.append(
        f'<circle cx="{_num(cx)}" cy="{_num(cy)}" r="{_num(head_r)}" fill="#fbfaf8" '
        f'stroke="{OUTLINE}" stroke-width="1.5"/>'
    )
    nose = [at(-0.09, 0.996), at(0.0, 1.12), at(0.09, 0.996)]
    body.append(
        f'<path d="M{nose[0][0]},{nose[0][1]} L{nose[1][0]},{nose[1][1]} L{nose[2][0]},'
        f'{nose[2][1]}" fill="none" stroke="{OUTLINE}" stroke-width="1.5"/>'
    )
    ear_x, ear_y = math.sqrt(1 - 0.15**2), 0.15
    ear_rx, ear_ry = _num(0.07 * head_r), _num(0.16 * head_r)
    for side in (-1, 1):
        start, end = at(side * ear_x, side * ear_y), at(side * ear_x, -side * ear_y)
        body.append(
            f'<path d="M{start[0]},{start[1]} A{ear_rx},{ear_ry} 0 0 1 {end[0]},{end[1]}" '
            f'fill="none" stroke="{OUTLINE}" stroke-width="1.5"/>'
        )

    dot_px = _num(dot * head_r)
    for name, flagged, checked, (x, y) in placed:
        px, py = at(x, y)
        if checked == 0:
            style = f'fill="{NOT_CHECKED}" stroke="{INK}" stroke-dasharray="2,1.5"'
        else:
            style = f'fill="{share_colour(flagged / checked)}" stroke="{INK}"'
        body.append(
            f'<circle cx="{px}" cy="{py}" r="{dot_px}" {style} stroke-width="0.6">'
            f"<title>{_xml(_describe(name, flagged, checked))}</title></circle>"
        )

    y = size_px + 2.0
    if unplaced:
        words = [_short(row[0]) for row in unplaced]
        width_chars = max(10, int((size_px - 2 * pad) / (font * 0.55)))
        lines = _wrap(words, width_chars - len("not placed: "), UNPLACED_MAX_LINES)
        lines[0] = "not placed: " + lines[0]
        tooltip = "\n".join(_describe(*row[:3]) for row in unplaced)
        spans = []
        for index, text in enumerate(lines):
            spans.append(
                f'<tspan x="{_num(pad)}" y="{_num(y + line * (index + 1) - 3)}">'
                f"{_xml(text)}</tspan>"
            )
        body.append(
            f'<text font-size="{font}" fill="{INK}"><title>{_xml(tooltip)}</title>'
            + "".join(spans)
            + "</text>"
        )
        y += line * len(lines) + 4

    # Legend: the ramp as contiguous swatches, then the "not checked" swatch.
    swatch_w = (size_px - 2 * pad) / (len(LEGEND_SHARES) + 4)
    swatch_h = font
    legend = [f'<g font-size="{font}" fill="{INK}" text-anchor="middle">']
    for index, share in enumerate(LEGEND_SHARES):
        left = pad + index * swatch_w
        legend.append(
            f'<rect x="{_num(left)}" y="{_num(y)}" width="{_num(swatch_w)}" '
            f'height="{_num(swatch_h)}" fill="{share_colour(share)}" stroke="{OUTLINE}" '
            'stroke-width="0.5"/>'
        )
        if share in LEGEND_LABELS:
            legend.append(
                f'<text x="{_num(left + swatch_w / 2)}" y="{_num(y + swatch_h + line)}">'
                f"{LEGEND_LABELS[share]}</text>"
            )
    left = pad + (len(LEGEND_SHARES) + 1.5) * swatch_w
    legend.append(
        f'<rect x="{_num(left)}" y="{_num(y)}" width="{_num(swatch_w)}" '
        f'height="{_num(swatch_h)}" fill="{NOT_CHECKED}" stroke="{INK}" stroke-width="0.6" '
        'stroke-dasharray="2,1.5"/>'
        f'<text x="{_num(left + swatch_w / 2)}" y="{_num(y + swatch_h + line)}">'
        "not checked</text>"
    )
    legend.append("</g>")
    body.extend(legend)
    height = y + swatch_h + line + 6

    return (
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{size_px}" height="{_num(height)}" '
        f'viewBox="0 0 {size_px} {_num(height)}" role="img" aria-labelledby="{title_id}" '
        f'font-family="sans-serif" class="headplot">' + "".join(body) + "</svg>"
    )
