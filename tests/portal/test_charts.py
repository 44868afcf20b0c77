"""The overview's weekly stacked bars and share bar: the SVG parses, sizes follow the counts,
the week axis is filled and clipped, text is escaped, colours are fixed, bad input is named."""

import datetime
import re
import xml.etree.ElementTree as ET

import pytest

from portal.dashboard import charts
from portal.dashboard.charts import GREYS, series_colour, share_bar, weekly_bars

SVG = "{http://www.w3.org/2000/svg}"
MONDAY = datetime.date(2026, 10, 12)
TOLERANCE_PX = 0.5


def _monday(offset_weeks):
    return MONDAY + datetime.timedelta(weeks=offset_weeks)


def _parse(svg):
    return ET.fromstring(svg)


def _title(root):
    title = root.find(f"{SVG}title")
    assert title is not None, "the chart's first child must be its <title>"
    return title


def _weeks(root):
    return root.findall(f".//{SVG}g[@class='week']")


def _segments(week):
    """{series name: rect} of one week's bar."""
    return {rect.get("data-series"): rect for rect in week.findall(f"{SVG}rect")}


def _height(rect):
    return float(rect.get("height"))


def _texts(root, group_class):
    group = root.find(f".//{SVG}g[@class='{group_class}']")
    return [text.text for text in group.findall(f"{SVG}text")]


def _label(day):
    """The short week label the task asks for: day without a leading zero, English month."""
    months = "Jan Feb Mar Apr May Jun Jul Aug Sep Oct Nov Dec".split()
    return f"{day.day} {months[day.month - 1]}"


# --- structure and accessibility --------------------------------------------------------


@pytest.mark.parametrize(
    "svg",
    [
        weekly_bars([_monday(0), _monday(1)], {"pass": {_monday(0): 3}}, label="Verdicts"),
        weekly_bars([], {}, label="Verdicts"),
        share_bar({"pass": 7, "fail": 3}, label="Verdicts"),
        share_bar({"pass": 0}, label="Verdicts"),
    ],
    ids=["bars", "bars-empty", "share", "share-empty"],
)
def test_every_chart_parses_and_is_labelled_by_its_title(svg):
    root = _parse(svg)
    assert root.tag == f"{SVG}svg"
    assert root.get("role") == "img"
    title = _title(root)
    assert root.get("aria-labelledby") == title.get("id")
    assert title.text.startswith("Verdicts")
    assert list(root)[0] is title


def test_same_input_gives_the_same_svg_and_other_input_another_title_id():
    weeks = [_monday(0), _monday(2)]
    series = {"pass": {_monday(0): 2, _monday(2): 1}}
    first = weekly_bars(weeks, series, label="Verdicts")
    assert weekly_bars(list(weeks), {"pass": dict(series["pass"])}, label="Verdicts") == first
    other = weekly_bars(weeks, {"pass": {_monday(0): 3}}, label="Verdicts")
    assert _title(_parse(first)).get("id") != _title(_parse(other)).get("id")


def test_the_title_names_the_series_the_weeks_and_the_unit():
    weeks = [_monday(0), _monday(5)]
    root = _parse(
        weekly_bars(
            weeks,
            {"accepted": {_monday(0): 4}, "rejected": {_monday(5): 1}},
            label="Uploads per week",
            unit="uploads",
        )
    )
    title = _title(root).text
    assert "accepted, rejected" in title
    assert "12 Oct 2026" in title and "16 Nov 2026" in title
    assert "4 uploads" in title


# --- geometry ---------------------------------------------------------------------------


def test_segment_heights_are_proportional_to_the_counts():
    weeks = [_monday(0), _monday(1), _monday(2)]
    counts = {"pass": {weeks[0]: 10, weeks[1]: 5, weeks[2]: 1}, "fail": {weeks[0]: 5}}
    root = _parse(weekly_bars(weeks, counts, label="Verdicts"))
    bars = [_segments(week) for week in _weeks(root)]
    assert len(bars) == 3

    # A bar of 10 is twice one of 5; a segment of 5 is as tall in any series.
    assert abs(_height(bars[0]["pass"]) - 2 * _height(bars[1]["pass"])) <= TOLERANCE_PX
    assert abs(_height(bars[0]["fail"]) - _height(bars[1]["pass"])) <= TOLERANCE_PX
    # Every segment: the same pixels per count.
    per_count = _height(bars[1]["pass"]) / 5
    for week, bar in zip(weeks, bars, strict=True):
        for name, rect in bar.items():
            expected = counts[name].get(week, 0) * per_count
            assert abs(_height(rect) - expected) <= TOLERANCE_PX


def test_segments_stack_without_gaps_and_the_tallest_bar_reaches_the_top_label():
    weeks = [_monday(0), _monday(1)]
    counts = {"pass": {weeks[0]: 6, weeks[1]: 2}, "review": {weeks[0]: 3}, "fail": {weeks[0]: 1}}
    root = _parse(weekly_bars(weeks, counts, label="Verdicts", unit="recordings"))
    axis = root.findall(f"{SVG}line")[1]  # grid line first, then the y axis
    top, bottom = float(axis.get("y1")), float(axis.get("y2"))

    first = _segments(_weeks(root)[0])
    level = bottom
    for name in ("pass", "review", "fail"):  # the series' order, from the bottom up
        rect = first[name]
        assert abs(float(rect.get("y")) + _height(rect) - level) <= TOLERANCE_PX
        level = float(rect.get("y"))
    assert abs(level - top) <= TOLERANCE_PX

    tallest = sum(counts[name].get(weeks[0], 0) for name in counts)
    texts = [t.text for t in root.iter(f"{SVG}text")]
    assert f"{tallest} recordings" in texts and "0 recordings" in texts


def test_missing_weeks_are_drawn_as_empty_slots():
    """Weeks 0 and 4 listed: weeks 1-3 are three empty slots between them, one per Monday."""
    weeks = [_monday(0), _monday(4)]
    root = _parse(
        weekly_bars(weeks, {"pass": {weeks[0]: 2, weeks[1]: 3}, "fail": {}}, label="Verdicts")
    )
    slots = _weeks(root)
    assert [slot.get("data-week") for slot in slots] == [_monday(i).isoformat() for i in range(5)]
    for slot in slots[1:4]:
        rects = slot.findall(f"{SVG}rect")
        assert len(rects) == 2
        assert all(_height(rect) == 0 for rect in rects)
    assert _height(_segments(slots[0])["pass"]) > 0
    assert _height(_segments(slots[4])["pass"]) > 0
    # Slots are evenly spaced, gap or not.
    xs = [float(slot.find(f"{SVG}rect").get("x")) for slot in slots]
    steps = [b - a for a, b in zip(xs, xs[1:], strict=False)]
    assert max(steps) - min(steps) <= 0.02


@pytest.mark.parametrize("listed", [range(30), [0, 12, 35]], ids=["30-weeks", "36-with-gaps"])
def test_only_the_last_26_weeks_are_drawn(listed):
    weeks = [_monday(i) for i in listed]
    counts = {week: index + 1 for index, week in enumerate(weeks)}
    root = _parse(weekly_bars(weeks, {"pass": counts}, label="Verdicts"))
    slots = _weeks(root)
    assert len(slots) == charts.MAX_WEEKS == 26
    last = weeks[-1]
    first_shown = last - datetime.timedelta(weeks=25)
    assert slots[0].get("data-week") == first_shown.isoformat()
    assert slots[-1].get("data-week") == last.isoformat()

    shown = sum(n for week, n in counts.items() if week >= first_shown)
    assert f"pass {shown}" in _texts(root, "legend")
    texts = [t.text for t in root.iter(f"{SVG}text")]
    tallest = max(n for week, n in counts.items() if week >= first_shown)
    assert f"{tallest} uploads" in texts


# --- text -------------------------------------------------------------------------------


def test_week_labels_are_first_last_and_every_fourth_week():
    weeks = [_monday(i) for i in range(13)]
    root = _parse(weekly_bars(weeks, {"pass": {weeks[3]: 1}}, label="Verdicts"))
    assert _texts(root, "x-labels") == [_label(weeks[i]) for i in (0, 4, 8, 12)]
    assert _label(MONDAY) == "12 Oct"


def test_week_labels_never_overlap_and_keep_first_and_last():
    weeks = [_monday(i) for i in range(26)]
    root = _parse(weekly_bars(weeks, {"pass": {weeks[0]: 1}}, label="Verdicts", width_px=240))
    group = root.find(f".//{SVG}g[@class='x-labels']")
    labels = [(float(t.get("x")), t.text) for t in group.findall(f"{SVG}text")]
    assert labels[0][1] == _label(weeks[0]) and labels[-1][1] == _label(weeks[-1])
    allowed = {_label(weeks[i]) for i in range(0, 26, 4)} | {_label(weeks[-1])}
    assert {text for _, text in labels} <= allowed
    for (x_a, a), (x_b, b) in zip(labels, labels[1:], strict=False):
        assert x_b - x_a >= (len(a) + len(b)) / 2 * charts.CHAR_W


def test_segment_titles_and_legend_totals():
    weeks = [_monday(0), _monday(1)]
    counts = {"pass": {weeks[0]: 5, weeks[1]: 7}, "review": {weeks[1]: 2}}
    root = _parse(weekly_bars(weeks, counts, label="Verdicts"))
    first = _segments(_weeks(root)[0])
    assert first["pass"].find(f"{SVG}title").text == "week of 12 Oct 2026: 5 pass"
    assert first["review"].find(f"{SVG}title").text == "week of 12 Oct 2026: 0 review"
    assert _texts(root, "legend") == [
        f"{name} {sum(values.values())}" for name, values in counts.items()
    ]
    # One <title> per segment and one for the chart, no other.
    rects = [r for w in _weeks(root) for r in w.findall(f"{SVG}rect")]
    assert all(len(r.findall(f"{SVG}title")) == 1 for r in rects)
    assert len(list(root.iter(f"{SVG}title"))) == len(rects) + 1


def test_a_long_legend_stops_after_three_lines_and_counts_the_rest():
    weeks = [_monday(0)]
    names = [f"series number {i:02d} with a long name" for i in range(20)]
    root = _parse(weekly_bars(weeks, {n: {weeks[0]: 1} for n in names}, label="Many"))
    legend = root.find(f".//{SVG}g[@class='legend']")
    texts = [t.text for t in legend.findall(f"{SVG}text")]
    more = re.fullmatch(r"\+(\d+) more", texts[-1])
    assert more is not None
    assert len(texts) - 1 + int(more.group(1)) == len(names)
    assert len({t.get("y") for t in legend.findall(f"{SVG}text")}) <= charts.LEGEND_MAX_LINES
    width = float(root.get("width"))
    for swatch in legend.iter(f"{SVG}rect"):
        assert float(swatch.get("x")) + float(swatch.get("width")) <= width


def test_names_and_labels_are_escaped():
    nasty = '<b>&"'
    weeks = [_monday(0)]
    svg = weekly_bars(weeks, {nasty: {weeks[0]: 2}}, label=f"label {nasty}", unit="a<b")
    assert "<b>" not in svg
    root = _parse(svg)
    assert _title(root).text.startswith(f"label {nasty}")
    rect = _segments(_weeks(root)[0])[nasty]
    assert rect.find(f"{SVG}title").text == f"week of 12 Oct 2026: 2 {nasty}"
    assert f"{nasty} 2" in _texts(root, "legend")
    assert "2 a<b" in [t.text for t in root.iter(f"{SVG}text")]

    svg = share_bar({nasty: 1}, label=nasty)
    assert "<b>" not in svg
    root = _parse(svg)
    assert root.find(f"{SVG}rect").get("data-part") == nasty
    assert root.find(f"{SVG}rect/{SVG}title").text == f"{nasty}: 1 of 1, 100.0 %"


# --- colours ----------------------------------------------------------------------------


def _contrast_on_white(colour):
    """Contrast ratio against white. Source: WCAG 2.1, definitions of "relative luminance"
    and "contrast ratio" (https://www.w3.org/TR/WCAG21/#dfn-relative-luminance)."""
    channels = [int(colour[i : i + 2], 16) / 255 for i in (1, 3, 5)]
    linear = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in channels]
    luminance = 0.2126 * linear[0] + 0.7152 * linear[1] + 0.0722 * linear[2]
    return 1.05 / (luminance + 0.05)


def test_known_names_share_three_distinct_colours():
    assert series_colour("pass") == series_colour("accepted")
    assert series_colour("review") == series_colour("waiting")
    assert series_colour("fail") == series_colour("rejected")
    assert len({series_colour(n) for n in ("pass", "review", "fail")}) == 3
    assert series_colour(" Pass ") == series_colour("pass")
    assert not {series_colour(n) for n in ("pass", "review", "fail")} & set(GREYS)


def test_every_colour_stands_out_on_white():
    """At least 3:1 against the white page, the WCAG 2.1 minimum for graphical objects
    (source: WCAG 2.1 success criterion 1.4.11, Non-text Contrast)."""
    for colour in (*charts.KNOWN_COLOURS.values(), *GREYS):
        assert _contrast_on_white(colour) >= 3.0, colour


def test_colours_are_fixed_per_name_whatever_is_drawn_beside_them():
    weeks = [_monday(0)]
    one = {"pass": {weeks[0]: 1}, "site notes": {weeks[0]: 2}, "fail": {weeks[0]: 1}}
    other = {"extra": {weeks[0]: 4}, "fail": {weeks[0]: 3}, "site notes": {weeks[0]: 1}}

    def fills(series):
        bar = _segments(_weeks(_parse(weekly_bars(weeks, series, label="x")))[0])
        return {name: rect.get("fill") for name, rect in bar.items()}

    a, b = fills(one), fills(other)
    assert a["fail"] == b["fail"] == series_colour("fail")
    assert a["site notes"] == b["site notes"] == series_colour("site notes")
    assert series_colour("site notes") in GREYS
    assert a["pass"] == series_colour("pass")

    shares = _parse(share_bar({"site notes": 1, "fail": 2}, label="x"))
    fills_share = {r.get("data-part"): r.get("fill") for r in shares.iter(f"{SVG}rect")}
    assert fills_share == {"site notes": a["site notes"], "fail": a["fail"]}


# --- share bar --------------------------------------------------------------------------


def test_share_bar_segments_are_proportional_and_fill_the_width():
    parts = {"pass": 70, "review": 20, "fail": 10}
    width = 160
    root = _parse(share_bar(parts, label="Verdicts", width_px=width))
    rects = list(root.iter(f"{SVG}rect"))
    assert [r.get("data-part") for r in rects] == list(parts)
    total = sum(parts.values())
    x = 0.0
    for rect, (name, count) in zip(rects, parts.items(), strict=True):
        assert abs(float(rect.get("x")) - x) <= TOLERANCE_PX
        assert abs(float(rect.get("width")) - width * count / total) <= TOLERANCE_PX
        x += float(rect.get("width"))
        share = f"{100 * count / total:.1f} %"
        assert rect.find(f"{SVG}title").text == f"{name}: {count} of {total}, {share}"
    assert abs(x - width) <= TOLERANCE_PX
    assert rects[0].find(f"{SVG}title").text == "pass: 70 of 100, 70.0 %"


def test_share_bar_says_less_than_a_tenth_rather_than_zero():
    root = _parse(share_bar({"pass": 2999, "fail": 1}, label="Verdicts"))
    tips = [r.find(f"{SVG}title").text for r in root.iter(f"{SVG}rect")]
    assert tips == ["pass: 2999 of 3000, > 99.9 %", "fail: 1 of 3000, < 0.1 %"]


@pytest.mark.parametrize("parts", [{}, {"pass": 0, "review": 0, "fail": 0}])
def test_share_bar_of_nothing_is_a_grey_none_bar(parts):
    root = _parse(share_bar(parts, label="Verdicts"))
    rects = list(root.iter(f"{SVG}rect"))
    assert len(rects) == 1
    assert rects[0].get("fill") == charts.NONE_COLOUR
    assert rects[0].get("width") == root.get("width")
    assert [t.text for t in root.iter(f"{SVG}text")] == ["none"]
    assert _title(root).text == "Verdicts: none"


# --- empty input ------------------------------------------------------------------------


@pytest.mark.parametrize(
    "weeks, series",
    [
        ([], {}),
        ([], {"pass": {}, "fail": {}}),
        ([MONDAY], {}),
        ([MONDAY, _monday(3)], {"pass": {MONDAY: 0}, "fail": {}}),
    ],
    ids=["nothing", "empty-series", "no-series", "all-zero"],
)
def test_no_data_says_nothing_yet(weeks, series):
    root = _parse(weekly_bars(weeks, series, label="Uploads", width_px=300, height_px=140))
    assert root.get("role") == "img"
    assert _title(root).text == "Uploads: nothing yet"
    assert [t.text for t in root.iter(f"{SVG}text")] == ["nothing yet"]
    assert not list(root.iter(f"{SVG}rect"))
    assert (root.get("width"), root.get("height")) == ("300", "140")


# --- bad input --------------------------------------------------------------------------


@pytest.mark.parametrize(
    "weeks, series, field",
    [
        ([MONDAY], {"pass": {MONDAY: -1}}, r"series\['pass'\]\[2026-10-12\].*negative"),
        ([MONDAY], {"pass": {MONDAY: 1.5}}, r"series\['pass'\]\[2026-10-12\].*whole number"),
        ([MONDAY], {"pass": {MONDAY: True}}, r"series\['pass'\]\[2026-10-12\]"),
        ([MONDAY, "2026-10-19"], {}, r"weeks\[1\] must be a datetime\.date"),
        ([datetime.datetime(2026, 10, 12)], {}, r"weeks\[0\] must be a datetime\.date"),
        ([_monday(1), MONDAY], {}, r"weeks must be sorted.*weeks\[1\]"),
        ([MONDAY, MONDAY], {}, r"weeks must be sorted.*weeks\[1\]"),
        ([MONDAY + datetime.timedelta(days=2)], {}, r"weeks\[0\].*Wednesday.*Monday"),
        ("2026-10-12", {}, r"weeks must be a list"),
        ([MONDAY], {"pass": {_monday(1): 1}}, r"series\['pass'\]\[2026-10-19\].*not in weeks"),
        ([MONDAY], {"pass": {"2026-10-12": 1}}, r"series\['pass'\].*datetime\.date"),
        ([MONDAY], {"pass": [1]}, r"series\['pass'\] must map"),
        ([MONDAY], {"": {}}, r"series: names"),
        ([MONDAY], [("pass", {})], r"series must map"),
    ],
)
def test_bad_weekly_input_names_the_field(weeks, series, field):
    with pytest.raises(ValueError, match=field):
        weekly_bars(weeks, series, label="Verdicts")


@pytest.mark.parametrize(
    "kwargs, field",
    [
        ({"label": " "}, r"label must name"),
        ({"label": None}, r"label must name"),
        ({"label": "x", "unit": ""}, r"unit must name"),
        ({"label": "x", "unit": "u" * 40}, r"unit must be a short word"),
        ({"label": "x", "width_px": 10}, r"width_px must be between"),
        ({"label": "x", "height_px": 150.0}, r"height_px must be a whole number"),
    ],
)
def test_bad_weekly_options_name_the_field(kwargs, field):
    with pytest.raises(ValueError, match=field):
        weekly_bars([MONDAY], {"pass": {MONDAY: 1}}, **kwargs)


@pytest.mark.parametrize(
    "parts, kwargs, field",
    [
        ({"pass": -3}, {}, r"parts\['pass'\].*negative"),
        ({"pass": "7"}, {}, r"parts\['pass'\].*whole number"),
        ({3: 1}, {}, r"parts: names"),
        ([("pass", 1)], {}, r"parts must map"),
        ({"pass": 1}, {"label": ""}, r"label must name"),
        ({"pass": 1}, {"width_px": True}, r"width_px must be a whole number"),
    ],
)
def test_bad_share_input_names_the_field(parts, kwargs, field):
    kwargs = {"label": "Verdicts", **kwargs}
    with pytest.raises(ValueError, match=field):
        share_bar(parts, **kwargs)
