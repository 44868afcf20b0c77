"""The quality pages name each measurement with its unit and say which side of its threshold
is bad; the words must agree with the comparison each check makes. Checked by running the
checks on invented signals (a flat channel, a copied channel, scaled channels) and reading
the words back: plumbing, common practice, no source. The checks' own definitions are tested
against PREP and pyprep in tests/unit/test_qc_*.py."""

import ast
import re
from dataclasses import fields
from pathlib import Path

import numpy as np

from cairn_science.qc import checks
from cairn_science.qc.checks import MEASURES, measure_words
from cairn_science.qc.settings import QCSettings, setting_words


def bad_by_words(words, value, threshold):
    """What the page's words say about ``value`` (True: bad)."""
    if words.startswith("above"):
        return value > threshold
    if words.startswith("below"):
        return value < threshold
    if words.startswith("beyond ±"):
        return abs(value) > threshold
    if "or more" in words:
        return value >= threshold
    if "or less" in words:
        return value <= threshold
    raise AssertionError(f"no direction in {words!r}")


def test_every_check_has_a_measurement_with_unit_and_direction():
    source = Path(checks.__file__).read_text()
    names = {node.args[0].value for node in ast.walk(ast.parse(source))
             if isinstance(node, ast.Call) and getattr(node.func, "id", "") in (
                 "ChannelCheck", "_skipped") and node.args
             and isinstance(node.args[0], ast.Constant)}
    assert names and names <= set(MEASURES), names - set(MEASURES)
    for name in names:
        measured, bad = measure_words(name, 1.5, 2.0)
        assert "(" in measured or "per minute" in measured, measured  # a unit or scale
        assert re.search(r"\b2\b", bad), bad  # the threshold, written plainly


def _rng_signal(n_channels=6, seconds=20, sfreq_hz=250, seed=0):
    rng = np.random.default_rng(seed)
    return rng.normal(0, 20e-6, (n_channels, seconds * sfreq_hz)), sfreq_hz


def _agree(outcome):
    seen = {True: 0, False: 0}
    for index, value in enumerate(outcome.values):
        if not np.isfinite(value):
            continue
        threshold = outcome.threshold_for(index)
        _, bad = measure_words(outcome.check, float(value), threshold)
        said = bad_by_words(bad, float(value), float(f"{threshold:.3g}"))
        assert said == bool(outcome.flagged[index]), (outcome.check, index, value, bad)
        seen[said] += 1
    return seen


def test_the_words_agree_with_the_checks_comparisons():
    data, sfreq_hz = _rng_signal()
    data[2, 1000:4000] = data[2, 999]  # flat for 12 s of 20
    assert _agree(checks.check_dropout(data, sfreq_hz=sfreq_hz)) == {True: 1, False: 5}
    data, _ = _rng_signal(seed=1)
    data[4] = data[3] + 1e-9 * np.random.default_rng(2).normal(size=data.shape[1])
    pairs = np.array([[0, 1], [1, 2], [3, 4], [4, 5]])
    seen = _agree(checks.check_bridging(data, sfreq_hz=sfreq_hz, pairs=pairs,
                                        ch_names=[f"E{i}" for i in range(6)]))
    assert seen == {True: 2, False: 4}
    seen = _agree(checks.check_amplitude_factor(np.array([1.0, 3.5, 0.2, 1.1, 0.9]),
                                                factor_max=3.0))
    assert seen == {True: 2, False: 3}


def test_settings_are_named_with_their_units():
    assert setting_words("min_duration_s") == "min duration (s)"
    assert setting_words("min_sfreq_hz") == "min sfreq (Hz)"
    assert setting_words("jump_rate_max_per_min") == "jump rate max (per minute)"
    assert setting_words("bad_channel_share_review") == "bad channel share review (0–1)"
    for field in fields(QCSettings):
        words = setting_words(field.name)
        assert "_" not in words, words
        for ending, unit in (("_s", "(s)"), ("_hz", "(Hz)"), ("_uv", "(µV)"), ("_db", "(dB)")):
            if field.name.endswith(ending) and not field.name.endswith("_per_min"):
                assert words.endswith(unit), (field.name, words)
