"""Charts for the study overview, rendered as inline SVG: stacked bars of counts per week and
a single bar of shares (e.g. of quality verdicts).

Pure (no Django): dates, counts and a label in, an SVG string out, the same for the same input.
The page prints the same numbers as a table; the charts carry a title, axes, a legend and one
tooltip per segment, nothing more.
"""

import datetime
import hashlib
import operator
from collections.abc import Mapping, Sequence

from portal.dashboard.headplot import INK, NOT_CHECKED, OUTLINE
from portal.dashboard.headplot import svg_number as _num
from portal.dashboard.headplot import xml_text as _xml

# Fixed colours for the names the overview uses (case and surrounding spaces ignored). Each
# has at least 4:1 contrast on white, and they differ in lightness as well as in hue.
GOOD = "#1c7a74"  # calm green-blue
WAIT = "#a86a00"  # amber
BAD = "#9b1b22"  # deep red
KNOWN_COLOURS = {
    "pass": GOOD,
    "usable": GOOD,
    "accepted": GOOD,
    "review": WAIT,
    "needs a look": WAIT,
    "waiting": WAIT,
    "fail": BAD,
    "not usable": BAD,
    "rejected": BAD,
}
# Any other name: one of these greys (each >= 3:1 on white), picked by a hash of the name so
# that a name keeps its grey across charts and whatever else is drawn beside it.
GREYS = ("#5c6166", "#888d92", "#44484d", "#6e7378", "#525659", "#7b8086")
NONE_COLOUR = NOT_CHECKED
GRID = "#dedcd7"
PAPER = "#ffffff"

MAX_WEEKS = 26
LABEL_EVERY_WEEKS = 4
WEEK = datetime.timedelta(days=7)
MONTHS = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec")
WEEKDAYS = ("Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday", "Sunday")

BARS_WIDTH_PX = (240, 2000)
BARS_HEIGHT_PX = (120, 1000)
SHARE_WIDTH_PX = (40, 2000)
SHARE_HEIGHT_PX = 14
FONT_PX = 10
LINE_PX = 14
CHAR_W = 0.6 * FONT_PX  # a generous average glyph width for sans-serif, for layout only
PAD_PX = 4
BAR_FILL = 0.72  # share of a week's slot the bar covers
LEGEND_MAX_LINES = 3
LEGEND_NAME_CHARS = 24
UNIT_MAX_CHARS = 24


# --- colours and words ------------------------------------------------------------------


def series_colour(name):
    """Hex fill of a series: its own colour for a known name, else a grey fixed by the name."""
    if not isinstance(name, str):
        raise TypeError(f"name must be a series name (str), got {type(name).__name__}")
    known = KNOWN_COLOURS.get(name.strip().casefold())
    if known is not None:
        return known
    digest = hashlib.sha256(name.encode("utf-8", "surrogatepass")).digest()
    return GREYS[digest[0] % len(GREYS)]


def _day(day):
    return f"{day.day} {MONTHS[day.month - 1]}"


def _long_day(day):
    return f"{_day(day)} {day.year}"


def _percent(part, total):
    text = f"{100.0 * part / total:.1f}"
    if text == "0.0" and part > 0:
        return "< 0.1 %"
    if text == "100.0" and part < total:
        return "> 99.9 %"
    return f"{text} %"


def _short(name):
    return name if len(name) <= LEGEND_NAME_CHARS else name[: LEGEND_NAME_CHARS - 1] + "…"


def _text_w(text):
    return len(text) * CHAR_W


# --- input ------------------------------------------------------------------------------


def _text(value, field, what):
    if not isinstance(value, str) or not value.strip():
        raise ValueError(f"{field} must name {what}, got {value!r}")
    return value


def _pixels(value, field, bounds):
    low, high = bounds
    if isinstance(value, bool) or not isinstance(value, int):
        raise ValueError(f"{field} must be a whole number of pixels, got {value!r}")
    if not low <= value <= high:
        raise ValueError(f"{field} must be between {low} and {high}, got {value}")
    return value


def _count(value, field):
    if isinstance(value, bool):
        raise ValueError(f"{field}: a count must be a whole number, got {value!r}")
    try:
        number = operator.index(value)
    except TypeError:
        raise ValueError(f"{field}: a count must be a whole number, got {value!r}") from None
    if number < 0:
        raise ValueError(f"{field}: a count must not be negative, got {number}")
    return number


def _is_date(value):
    # A datetime is a date too; a week is a calendar day, so refuse it rather than drop the time.
    return isinstance(value, datetime.date) and not isinstance(value, datetime.datetime)


def _checked_weeks(weeks):
    if isinstance(weeks, (str, bytes)) or not isinstance(weeks, Sequence):
        raise ValueError(
            f"weeks must be a list of dates (the Monday of each week), got {type(weeks).__name__}"
        )
    out = []
    for index, week in enumerate(weeks):
        if not _is_date(week):
            raise ValueError(
                f"weeks[{index}] must be a datetime.date (the Monday of a week), got {week!r}"
            )
        if week.weekday() != 0:
            raise ValueError(
                f"weeks[{index}]: {week.isoformat()} is a {WEEKDAYS[week.weekday()]}; "
                "pass the Monday of each week"
            )
        if out and week <= out[-1]:
            raise ValueError(
                f"weeks must be sorted oldest first without repeats: weeks[{index}] "
                f"({week.isoformat()}) does not come after weeks[{index - 1}] "
                f"({out[-1].isoformat()}); sort them"
            )
        out.append(week)
    return out


def _checked_series(series, listed):
    if not isinstance(series, Mapping):
        raise ValueError(
            f"series must map series names to {{week: count}}, got {type(series).__name__}"
        )
    rows = []
    for name, counts in series.items():
        if not isinstance(name, str) or not name.strip():
            raise ValueError(f"series: names must be non-empty strings, got {name!r}")
        if not isinstance(counts, Mapping):
            raise ValueError(
                f"series[{name!r}] must map week dates to counts, got {type(counts).__name__}"
            )
        checked = {}
        for week, value in counts.items():
            if not _is_date(week):
                raise ValueError(
                    f"series[{name!r}]: weeks must be datetime.date keys, got {week!r}"
                )
            field = f"series[{name!r}][{week.isoformat()}]"
            if week not in listed:
                raise ValueError(
                    f"{field}: {week.isoformat()} is not in weeks; list every week that "
                    "has a count in weeks"
                )
            checked[week] = _count(value, field)
        rows.append((name, checked))
    return rows


def _checked_parts(parts):
    if not isinstance(parts, Mapping):
        raise ValueError(f"parts must map names to counts, got {type(parts).__name__}")
    rows = []
    for name, value in parts.items():
        if not isinstance(name, str) or not name.strip():
            raise ValueError(f"parts: names must be non-empty strings, got {name!r}")
        rows.append((name, _count(value, f"parts[{name!r}]")))
    return rows


def _calendar(weeks):
    """Every Monday from the first listed week to the last, at most the last ``MAX_WEEKS``."""
    if not weeks:
        return []
    n = (weeks[-1] - weeks[0]).days // 7 + 1
    first = max(0, n - MAX_WEEKS)
    return [weeks[0] + WEEK * index for index in range(first, n)]


# --- drawing ----------------------------------------------------------------------------


def _title_id(kind, *parts):
    digest = hashlib.sha256(repr(parts).encode("utf-8", "surrogatepass"))
    return f"{kind}-{digest.hexdigest()[:12]}"


def _svg(width, height, title_id, kind, title, body):
    return (
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{_num(width)}" '
        f'height="{_num(height)}" viewBox="0 0 {_num(width)} {_num(height)}" role="img" '
        f'aria-labelledby="{title_id}" font-family="sans-serif" font-size="{FONT_PX}" '
        f'class="{kind}"><title id="{title_id}">{_xml(title)}</title>' + "".join(body) + "</svg>"
    )


def _x_labels(calendar, centre_of, width):
    """(x, text) of the week labels: the first, the last and every 4th week between them,
    leaving out any that would run into its neighbour."""
    n = len(calendar)
    wanted = sorted(set(range(0, n, LABEL_EVERY_WEEKS)) | {n - 1})

    def span(index):
        text = _day(calendar[index])
        half = _text_w(text) / 2
        x = min(max(centre_of(index), half + 1), width - half - 1)
        return x, text, x - half, x + half

    last = span(n - 1)
    kept = [span(0)]
    for index in wanted[1:-1]:
        label = span(index)
        if label[2] >= kept[-1][3] + CHAR_W and label[3] <= last[2] - CHAR_W:
            kept.append(label)
    if n > 1:
        kept.append(last)
    return [(x, text) for x, text, _, _ in kept]


def _legend(entries, left, right):
    """Entries (text, colour) flowed into at most ``LEGEND_MAX_LINES`` lines:
    ([(line, x, text, colour)], text counting the entries left out or None)."""
    swatch = FONT_PX - 1

    def entry_w(text):
        return swatch + 4 + _text_w(text) + 2 * CHAR_W

    placed, line, x = [], 0, left
    for text, colour in entries:
        if x > left and x + entry_w(text) > right:
            line, x = line + 1, left
        if line == LEGEND_MAX_LINES:
            break
        placed.append((line, x, text, colour))
        x += entry_w(text)
    hidden = len(entries) - len(placed)
    if not hidden:
        return placed, None
    while True:
        more = f"+{hidden} more"
        end = (placed[-1][1] + entry_w(placed[-1][2])) if placed else left
        if not placed or placed[-1][0] < LEGEND_MAX_LINES - 1 or end + _text_w(more) <= right:
            return placed, more
        placed.pop()
        hidden += 1


def _nothing(width, height, title_id, kind, label):
    body = [
        f'<text x="{_num(width / 2)}" y="{_num(height / 2 + FONT_PX * 0.35)}" '
        f'text-anchor="middle" fill="{OUTLINE}">nothing yet</text>'
    ]
    return _svg(width, height, title_id, kind, f"{label}: nothing yet", body)


def weekly_bars(weeks, series, *, label, unit="uploads", width_px=520, height_px=160):
    """Inline SVG of stacked bars, one per week, one segment per series.

    ``weeks``: the Mondays (``datetime.date``) of the weeks that have counts, sorted; the weeks
    missing between the first and the last are drawn empty, and only the last 26 are drawn.
    ``series``: {name: {Monday: count}}, stacked in its order from the bottom; every Monday
    with a count must be in ``weeks``. ``label`` names the chart; ``unit`` is what is counted.
    The SVG is ``width_px`` by ``height_px``; axis labels and legend are inside that box.
    """
    label = _text(label, "label", "what the chart shows")
    unit = _text(unit, "unit", "what is counted (e.g. 'uploads')")
    if len(unit) > UNIT_MAX_CHARS:
        raise ValueError(
            f"unit must be a short word for what is counted (at most {UNIT_MAX_CHARS} "
            f"characters), got {unit!r}"
        )
    width = _pixels(width_px, "width_px", BARS_WIDTH_PX)
    height = _pixels(height_px, "height_px", BARS_HEIGHT_PX)
    listed = _checked_weeks(weeks)
    rows = _checked_series(series, set(listed))

    calendar = _calendar(listed)
    drawn = [(name, [counts.get(week, 0) for week in calendar]) for name, counts in rows]
    totals = [sum(column) for column in zip(*(values for _, values in drawn), strict=True)]
    top = max(totals, default=0)
    title_id = _title_id("weekly-bars", label, unit, width, height, calendar, drawn)
    if top == 0:
        return _nothing(width, height, title_id, "weekly-bars", label)

    # Layout, top to bottom: the plot, the week labels, the legend.
    legend, more = _legend(
        [(f"{_short(name)} {sum(values)}", series_colour(name)) for name, values in drawn],
        PAD_PX,
        width - PAD_PX,
    )
    legend_lines = max(line for line, *_ in legend) + 1 if legend else 1
    y_labels = ("0 " + unit, f"{top} {unit}")
    plot_left = PAD_PX + max(_text_w(text) for text in y_labels) + 6
    plot_right = width - PAD_PX
    plot_top = FONT_PX
    plot_bottom = height - PAD_PX - legend_lines * LINE_PX - LINE_PX - 4
    scale = (plot_bottom - plot_top) / top
    slot = (plot_right - plot_left) / len(calendar)
    bar_w = max(1.0, slot * BAR_FILL)

    names = ", ".join(name for name, _ in drawn)
    span = (
        f"week of {_long_day(calendar[0])}"
        if len(calendar) == 1
        else f"weeks of {_long_day(calendar[0])} to {_long_day(calendar[-1])}"
    )
    title = f"{label} ({names}), {span}; at most {top} {unit} in a week"

    body = [
        # Grid line at the tallest bar, the y axis with its two labels, the x axis.
        f'<line x1="{_num(plot_left)}" y1="{_num(plot_top)}" x2="{_num(plot_right)}" '
        f'y2="{_num(plot_top)}" stroke="{GRID}" stroke-width="1"/>',
        f'<line x1="{_num(plot_left)}" y1="{_num(plot_top)}" x2="{_num(plot_left)}" '
        f'y2="{_num(plot_bottom)}" stroke="{OUTLINE}" stroke-width="1"/>',
        f'<g fill="{INK}" text-anchor="end">',
    ]
    for text, y in ((y_labels[0], plot_bottom), (y_labels[1], plot_top)):
        body.append(
            f'<text x="{_num(plot_left - 4)}" y="{_num(y + FONT_PX * 0.35)}">{_xml(text)}</text>'
        )
    body.append("</g>")

    for index, week in enumerate(calendar):
        x = _num(plot_left + index * slot + (slot - bar_w) / 2)
        body.append(f'<g class="week" data-week="{week.isoformat()}">')
        below = 0
        for name, values in drawn:
            count = values[index]
            y_top = plot_bottom - (below + count) * scale
            below += count
            tip = f"week of {_long_day(week)}: {count} {name}"
            body.append(
                f'<rect x="{x}" y="{_num(y_top)}" width="{_num(bar_w)}" '
                f'height="{_num(count * scale)}" fill="{series_colour(name)}" '
                f'stroke="{PAPER}" stroke-width="0.5" data-series="{_xml(name)}">'
                f"<title>{_xml(tip)}</title></rect>"
            )
        body.append("</g>")
    body.append(
        f'<line x1="{_num(plot_left)}" y1="{_num(plot_bottom)}" x2="{_num(plot_right)}" '
        f'y2="{_num(plot_bottom)}" stroke="{OUTLINE}" stroke-width="1"/>'
    )

    label_y = plot_bottom + FONT_PX + 4
    body.append(f'<g fill="{INK}" text-anchor="middle" class="x-labels">')
    for x, text in _x_labels(calendar, lambda i: plot_left + (i + 0.5) * slot, width):
        body.append(f'<text x="{_num(x)}" y="{_num(label_y)}">{_xml(text)}</text>')
    body.append("</g>")

    legend_top = label_y + 4
    body.append(f'<g fill="{INK}" class="legend">')
    swatch = FONT_PX - 1
    end = PAD_PX
    for line, x, text, colour in legend:
        baseline = legend_top + (line + 1) * LINE_PX - 3
        body.append(
            f'<rect x="{_num(x)}" y="{_num(baseline - swatch + 1)}" width="{swatch}" '
            f'height="{swatch}" fill="{colour}"/>'
            f'<text x="{_num(x + swatch + 4)}" y="{_num(baseline)}">{_xml(text)}</text>'
        )
        end = x + swatch + 4 + _text_w(text) + 2 * CHAR_W
    if more is not None:
        line = LEGEND_MAX_LINES - 1
        x = end if legend and legend[-1][0] == line else PAD_PX
        body.append(
            f'<text x="{_num(x)}" y="{_num(legend_top + (line + 1) * LINE_PX - 3)}">'
            f"{_xml(more)}</text>"
        )
    body.append("</g>")
    return _svg(width, height, title_id, "weekly-bars", title, body)


def share_bar(parts, *, label, width_px=160):
    """Inline SVG of one horizontal bar split into each part's share of the total.

    ``parts``: {name: count}, drawn left to right in its order; ``label`` names the bar.
    A total of 0 draws a grey bar marked "none".
    """
    label = _text(label, "label", "what the bar shows")
    width = _pixels(width_px, "width_px", SHARE_WIDTH_PX)
    rows = _checked_parts(parts)
    total = sum(count for _, count in rows)
    height = SHARE_HEIGHT_PX
    title_id = _title_id("share-bar", label, width, rows)

    if total == 0:
        body = [
            f'<rect x="0" y="0" width="{width}" height="{height}" fill="{NONE_COLOUR}" '
            'class="none"><title>none</title></rect>',
            f'<text x="{_num(width / 2)}" y="{_num(height / 2 + FONT_PX * 0.35)}" '
            f'text-anchor="middle" fill="{INK}">none</text>',
        ]
        return _svg(width, height, title_id, "share-bar", f"{label}: none", body)

    scale = width / total
    body, before, words = [], 0, []
    for name, count in rows:
        share = _percent(count, total)
        words.append(f"{name} {share}")
        tip = f"{name}: {count} of {total}, {share}"
        body.append(
            f'<rect x="{_num(before * scale)}" y="0" width="{_num(count * scale)}" '
            f'height="{height}" fill="{series_colour(name)}" stroke="{PAPER}" '
            f'stroke-width="0.5" data-part="{_xml(name)}"><title>{_xml(tip)}</title></rect>'
        )
        before += count
    title = f"{label}: " + ", ".join(words) + f" of {total}"
    return _svg(width, height, title_id, "share-bar", title, body)
