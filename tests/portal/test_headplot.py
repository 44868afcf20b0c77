"""The site head plot: electrode projection against the 10-20 geometry and MNE's own 2-D
topomap layout, and the SVG it renders."""

import math
import xml.etree.ElementTree as ET

import mne
import numpy as np
import pytest
from mne.channels.layout import _find_topomap_coords
from scipy import stats

from cairn_science.qc.positions import (
    CLASSIC_NAMES,
    TEMPLATE_MONTAGES,
    fit_sphere,
    template_position,
)
from portal.dashboard.headplot import head_svg, project, share_colour

SVG = "{http://www.w3.org/2000/svg}"
RING = ("Fpz", "Oz", "T7", "T8")
ANGLE_TOLERANCE_DEG = 5.0


def _template_montage():
    available = mne.channels.get_builtin_montages()
    return mne.channels.make_standard_montage(next(n for n in TEMPLATE_MONTAGES if n in available))


def _template_names():
    """The template's electrode names, without the classic aliases sharing a site (T3 = T7)."""
    return [name for name in _template_montage().ch_names if name not in CLASSIC_NAMES]


def _mne_layout(info, sphere):
    """MNE's 2-D topomap coordinates, centred on the sphere and scaled so the Fpz-Oz-T7-T8
    ring has median radius 1. MNE adds the sphere's (x, y) back to its output; undo that."""
    xy = _find_topomap_coords(info, np.arange(len(info["ch_names"])), sphere=sphere)
    xy = xy - np.asarray(sphere[:2])
    ring = [info["ch_names"].index(name) for name in RING]
    return xy / np.median(np.hypot(*xy[ring].T))


def _ours(names):
    xy = np.array([project(name) for name in names])
    ring = [names.index(name) for name in RING]
    return xy / np.median(np.hypot(*xy[ring].T))


def _angle_difference_deg(a, b):
    difference = np.arctan2(a[:, 1], a[:, 0]) - np.arctan2(b[:, 1], b[:, 0])
    return np.degrees(np.abs(np.angle(np.exp(1j * difference))))


def _parse(svg):
    return ET.fromstring(svg)


def _dots(root):
    """Channel dots: every circle that carries a <title> (the head outline carries none)."""
    return [c for c in root.iter(f"{SVG}circle") if c.find(f"{SVG}title") is not None]


# --- geometry ---------------------------------------------------------------------------


def test_midline_and_central_electrodes_sit_where_the_10_20_system_puts_them():
    """Cz at the vertex, Fz in front, Pz behind, C3 on the left, C4 on the right.

    Source: the 10-20 system (Jasper 1958; common practice) as realised in MNE's shipped
    template montage.
    """
    cz = project("Cz")
    assert math.hypot(*cz) < 0.1
    fz, pz = project("Fz"), project("Pz")
    assert abs(fz[0]) < 0.05 and fz[1] > 0.3
    assert abs(pz[0]) < 0.05 and pz[1] < -0.3
    c3, c4 = project("C3"), project("C4")
    assert c3[0] < -0.3 and abs(c3[1]) < 0.1
    assert c4[0] > 0.3 and abs(c4[1]) < 0.1
    # Central electrodes sit halfway out (20 % + 20 % of the 50 % from vertex to ring).
    for name in ("Fz", "Pz", "C3", "C4"):
        assert 0.3 < math.hypot(*project(name)) < 0.7, name


@pytest.mark.parametrize("name", RING)
def test_the_10_percent_ring_lies_on_the_head_outline(name):
    """Fpz, Oz, T7 and T8 lie on the circumference through the 10 % points, 90° from the
    vertex, i.e. on the outline at radius 1.

    Source: the 10-20 system (Jasper 1958; common practice) and MNE's template montage.
    """
    assert abs(math.hypot(*project(name)) - 1.0) <= 0.12


def test_names_are_matched_like_the_template_and_unknown_names_give_none():
    """Classic names share the modern site; case is ignored (``template_position``)."""
    assert project("T3") == project("T7")
    assert project("fz") == project("Fz")
    assert project("EOG left") is None
    assert template_position("EOG left") is None
    with pytest.raises(TypeError, match="ch_name"):
        project(3)


def test_projection_matches_mne_topomap_projection_in_the_same_frame():
    """The same positions and centre through MNE's topomap projection give the same
    directions for every electrode and nearly the same radial order.

    Source: MNE (``mne.channels.layout._find_topomap_coords``, the 2-D coordinates behind
    ``mne.viz.plot_topomap``), fed the template positions as they are (no fiducials, so MNE
    does not move them) and the centre of the least-squares sphere through them.
    """
    names = _template_names()
    positions = {name: template_position(name) for name in names}
    every = np.array([template_position(n) for n in _template_montage().ch_names])
    centre, radius = fit_sphere(every)
    montage = mne.channels.make_dig_montage(ch_pos=positions, coord_frame="head")
    info = mne.create_info(names, 250.0, "eeg")
    info.set_montage(montage)

    theirs = _mne_layout(info, (*centre, radius))
    ours = _ours(names)

    assert np.all(_angle_difference_deg(ours, theirs) < ANGLE_TOLERANCE_DEG)
    # MNE scales each electrode by its own distance from the centre; we do not. The radial
    # order still agrees.
    assert stats.spearmanr(np.hypot(*ours.T), np.hypot(*theirs.T)).statistic > 0.95


def test_projection_matches_mne_layout_of_the_shipped_montage():
    """MNE's layout of the shipped template montage (moved to MNE's head frame by its
    fiducials) agrees with ours in direction and radial order.

    Source: MNE (``make_standard_montage`` + ``create_info`` + ``set_montage``, then
    ``_find_topomap_coords``). The head frame is tilted against the template's frame by the
    rotation MNE computes from the fiducials (``compute_native_head_t``); a tilt of delta
    shifts projected points by up to delta / 90° (in head radii), which turns directions near
    the vertex by up to atan(shift / radius). Each electrode is allowed 5° plus that.
    """
    montage = _template_montage()
    names = _template_names()
    info = mne.create_info(names, 250.0, "eeg")
    info.set_montage(montage)
    head_frame = np.array([ch["loc"][:3] for ch in info["chs"]])
    centre, radius = fit_sphere(head_frame)  # a rigid move keeps the fitted sphere

    rotation = mne.channels.compute_native_head_t(montage)["trans"][:3, :3]
    tilt = math.acos(max(-1.0, min(1.0, (np.trace(rotation) - 1) / 2)))
    assert tilt < math.radians(10), "the template's frame should be near MNE's head frame"

    theirs = _mne_layout(info, (*centre, radius))
    ours = _ours(names)
    ours_radius = np.hypot(*ours.T)
    allowance = ANGLE_TOLERANCE_DEG + np.degrees(np.arctan2(tilt / (math.pi / 2), ours_radius))

    difference = _angle_difference_deg(ours, theirs)
    worst = int(np.argmax(difference - allowance))
    assert np.all(difference <= allowance), (names[worst], difference[worst], allowance[worst])
    assert stats.spearmanr(ours_radius, np.hypot(*theirs.T)).statistic > 0.95


# --- the SVG ----------------------------------------------------------------------------


def test_svg_parses_and_draws_one_dot_per_placed_channel_with_its_words():
    shares = {"Fz": (3, 40), "Cz": (0, 40), "O1": (40, 40), "EOG1": (2, 10), "Pz": (1, 3)}
    svg = head_svg(shares, label="Harrowmere")
    root = _parse(svg)

    assert root.tag == f"{SVG}svg" and root.get("role") == "img"
    title = root.find(f"{SVG}title")
    assert title.get("id") == root.get("aria-labelledby")
    assert title.text == "Harrowmere: share of checks flagging each channel"

    circles = list(root.iter(f"{SVG}circle"))
    dots = _dots(root)
    assert len(circles) == len(dots) + 1  # plus the head outline
    words = sorted(dot.find(f"{SVG}title").text for dot in dots)
    assert words == [
        "Cz: flagged in 0 of 40 checks (0 %)",
        "Fz: flagged in 3 of 40 checks (7.5 %)",
        "O1: flagged in 40 of 40 checks (100 %)",
        "Pz: flagged in 1 of 3 checks (33.3 %)",
    ]
    texts = " ".join("".join(t.itertext()) for t in root.iter(f"{SVG}text"))
    assert "not placed: EOG1" in texts
    for label in ("0 %", "50 %", "100 %", "not checked"):
        assert label in texts


def test_dots_sit_where_project_puts_them():
    """Fz above Cz (nose up), C3 left of C4, on screen."""
    root = _parse(head_svg({"Fz": (0, 1), "Cz": (0, 1), "C3": (0, 1), "C4": (0, 1)}, label="S"))
    at = {
        dot.find(f"{SVG}title").text.split(":")[0]: (float(dot.get("cx")), float(dot.get("cy")))
        for dot in _dots(root)
    }
    assert at["Fz"][1] < at["Cz"][1]
    assert at["C3"][0] < at["Cz"][0] < at["C4"][0]


def test_malicious_names_and_labels_are_escaped():
    evil = '<script>&"'
    control = "Fp1\x00\x1b"
    svg = head_svg({evil: (1, 2), control: (0, 2), "Cz": (1, 2)}, label='<b>"Site" & co</b>')
    assert "<script>" not in svg and "<b>" not in svg
    root = _parse(svg)  # parses even with control characters in a name
    title = root.find(f"{SVG}title").text
    assert title == '<b>"Site" & co</b>: share of checks flagging each channel'
    texts = " ".join("".join(t.itertext()) for t in root.iter(f"{SVG}text"))
    assert evil in texts
    assert "\x00" not in texts


def test_share_zero_and_share_one_have_different_colours_and_not_checked_is_grey():
    root = _parse(head_svg({"Fz": (0, 10), "Cz": (10, 10), "Pz": (0, 0)}, label="S"))
    fill = {dot.find(f"{SVG}title").text.split(":")[0]: dot.get("fill") for dot in _dots(root)}
    assert fill["Fz"] != fill["Cz"]
    assert fill["Fz"] == share_colour(0.0) and fill["Cz"] == share_colour(1.0)
    assert fill["Pz"] not in {share_colour(s) for s in np.linspace(0, 1, 21)}
    red, green, blue = (int(fill["Pz"][i : i + 2], 16) for i in (1, 3, 5))
    assert max(red, green, blue) - min(red, green, blue) < 20  # a grey
    pz = next(d for d in _dots(root) if d.find(f"{SVG}title").text.startswith("Pz"))
    assert pz.find(f"{SVG}title").text == "Pz: not checked"


def test_ramp_runs_from_light_to_dark():
    """Relative luminance (sRGB weights of WCAG 2) falls monotonically along the ramp.

    Source: W3C WCAG 2.x relative luminance definition.
    """

    def luminance(colour):
        channels = [int(colour[i : i + 2], 16) / 255 for i in (1, 3, 5)]
        linear = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in channels]
        return 0.2126 * linear[0] + 0.7152 * linear[1] + 0.0722 * linear[2]

    values = [luminance(share_colour(s)) for s in np.linspace(0, 1, 11)]
    assert all(a > b for a, b in zip(values, values[1:], strict=False))


def test_output_is_deterministic_and_sorted():
    shares = {"Pz": (1, 4), "Fz": (2, 4), "Cz": (0, 4), "X2": (0, 1), "X1": (0, 1)}
    reordered = dict(reversed(list(shares.items())))
    svg = head_svg(shares, label="S")
    assert svg == head_svg(reordered, label="S")
    root = _parse(svg)
    order = [dot.find(f"{SVG}title").text.split(":")[0] for dot in _dots(root)]
    assert order == sorted(order)
    assert "not placed: X1, X2" in " ".join("".join(t.itertext()) for t in root.iter(f"{SVG}text"))


def test_long_unplaced_lists_wrap_and_are_counted():
    shares = {f"AUX{i:03d}": (0, 1) for i in range(200)}
    root = _parse(head_svg(shares, label="S"))
    text = next(t for t in root.iter(f"{SVG}text") if "not placed" in "".join(t.itertext()))
    lines = [span.text for span in text.iter(f"{SVG}tspan")]
    assert 1 < len(lines) <= 3
    assert lines[-1].endswith("more")
    assert "AUX199: flagged in 0 of 1 check (0 %)" in text.find(f"{SVG}title").text


def test_tiny_and_near_total_shares_are_not_rounded_to_the_ends():
    root = _parse(head_svg({"Fz": (1, 5000), "Cz": (4999, 5000)}, label="S"))
    words = sorted(d.find(f"{SVG}title").text for d in _dots(root))
    assert words == [
        "Cz: flagged in 4999 of 5000 checks (> 99.9 %)",
        "Fz: flagged in 1 of 5000 checks (< 0.1 %)",
    ]


@pytest.mark.parametrize(
    ("shares", "words"),
    [
        ({"Fz": (5, 3)}, "shares['Fz']: times flagged (5) exceeds times checked (3)"),
        ({"Fz": (-1, 3)}, "shares['Fz']: times flagged must not be negative"),
        ({"Fz": (1.5, 3)}, "shares['Fz']: times flagged must be a whole number"),
        ({"Fz": (1, None)}, "shares['Fz']: times checked must be a whole number"),
        ({"Fz": 0.4}, "shares['Fz']: expected (times flagged, times checked)"),
        ({3: (1, 2)}, "shares: channel names must be strings"),
        ([("Fz", (1, 2))], "shares must map channel names"),
    ],
)
def test_bad_shares_name_the_field(shares, words):
    with pytest.raises(ValueError) as raised:
        head_svg(shares, label="S")
    assert words in str(raised.value)


def test_bad_label_and_size_name_the_field():
    with pytest.raises(ValueError, match="label"):
        head_svg({}, label=" ")
    with pytest.raises(ValueError, match="size_px"):
        head_svg({}, label="S", size_px=10)


def test_empty_shares_draw_an_empty_head():
    root = _parse(head_svg({}, label="S"))
    assert len(list(root.iter(f"{SVG}circle"))) == 1
    assert not _dots(root)
