"""Workload levels are listed in the rating scale's order, never alphabetically.

A rating scale's levels are disjoint ranges of ratings (the protocol's rating scale; the
study protocol check refuses gaps and overlaps), so ordering the levels by the lowest rating
among their windows gives the scale's order whatever the levels are called. Invented
plumbing data: common practice, no source.
"""

from types import SimpleNamespace

import pandas as pd

from cairn_science.learning.run import scale_order


def _frame():
    # levels of a 1-9 scale named so that alphabetical order is wrong: calm 1-3, busy 4-6,
    # swamped 7-9
    return pd.DataFrame({"level": ["swamped", "calm", "busy", "calm", "swamped", "busy"],
                         "rating": [8, 2, 5, 1, 7, 6]})


def test_levels_follow_the_ratings_not_the_alphabet():
    spec = SimpleNamespace(label={"kind": "level", "map": None})
    order = scale_order({"busy", "calm", "swamped"}, _frame(), spec)
    assert order == ["calm", "busy", "swamped"]
    assert order != sorted(order)


def test_levels_without_ratings_fall_back_to_low_moderate_high():
    spec = SimpleNamespace(label={"kind": "level", "map": None})
    frame = pd.DataFrame({"level": ["high", "low", "moderate"]})
    assert scale_order({"high", "low", "moderate"}, frame, spec) == ["low", "moderate", "high"]


def test_conditions_keep_their_names_order():
    spec = SimpleNamespace(label={"kind": "condition", "map": None})
    frame = pd.DataFrame({"condition": ["task", "rest"], "level": [None, None],
                          "rating": [None, None]})
    assert scale_order({"task", "rest"}, frame, spec) == ["rest", "task"]
