"""Workload ratings: where they are, whether they fit the study's scale, and the blocks.

A rating comes either from the session's scans.tsv (one recording = one block, condition and
rating in columns of the recording's row) or from a phenotype table keyed by participant,
session and task / run / trial_type (several blocks inside one continuous recording are
events whose trial_type names the condition).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING

from .report import BlockInfo
from .tables import MISSING, as_number

if TYPE_CHECKING:
    from .names import NameCheck
    from .report import Report
    from .sidecars import Tree

DEFAULT_SCALE = {
    "min": 1,
    "max": 9,
    "levels": [
        {"name": "low", "min": 1, "max": 3},
        {"name": "moderate", "min": 4, "max": 6},
        {"name": "high", "min": 7, "max": 9},
    ],
}
DEFAULT_RATINGS = {
    "source": "scans",
    "column": "workload_rating",
    "condition_column": "difficulty",
    "table": "phenotype/workload.tsv",
    "unrated_conditions": ["rest"],
}
SOURCES = ("scans", "phenotype")
KEY_COLUMNS = ("session_id", "task", "run", "trial_type")


@dataclass(frozen=True)
class Scale:
    """The study's rating scale: whole numbers ``min_value``..``max_value`` and level bins."""

    min_value: int
    max_value: int
    levels: tuple

    @classmethod
    def from_dict(cls, scale: dict | None) -> Scale:
        """Build from the caller's dict (None gives the default 1-9 scale); raises ValueError."""
        scale = DEFAULT_SCALE if scale is None else scale
        try:
            low, high = int(scale["min"]), int(scale["max"])
            levels = tuple(
                (str(level["name"]), int(level["min"]), int(level["max"]))
                for level in scale.get("levels", ())
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise ValueError(f"scale needs whole-number min and max and levels with name, "
                             f"min and max; got {scale!r} ({exc})") from None
        if low >= high:
            raise ValueError(f"scale min ({low}) must be below max ({high})")
        ordered = sorted(levels, key=lambda level: level[1])
        for name, start, stop in ordered:
            if not low <= start <= stop <= high:
                raise ValueError(f"level {name!r} ({start}-{stop}) must lie inside the scale "
                                 f"{low}-{high}")
        for (name_a, _, stop_a), (name_b, start_b, _) in zip(ordered, ordered[1:],
                                                             strict=False):
            if start_b <= stop_a:
                raise ValueError(f"levels {name_a!r} and {name_b!r} overlap")
        return cls(low, high, tuple(ordered))

    def level_of(self, rating: int) -> str | None:
        for name, start, stop in self.levels:
            if start <= rating <= stop:
                return name
        return None

    def parse(self, text: str) -> tuple[int | None, str | None]:
        """``(rating, problem)`` for a table cell: (None, None) for n/a or empty."""
        text = text.strip()
        if text in ("", MISSING):
            return None, None
        value = as_number(text)
        if value is None:
            return None, (f"rating {text!r} is not a number; write a whole number from "
                          f"{self.min_value} to {self.max_value}, or n/a")
        if value != math.floor(value):
            return None, (f"rating {text} is not a whole number; the study's scale has whole "
                          f"steps from {self.min_value} to {self.max_value}")
        rating = int(value)
        if not self.min_value <= rating <= self.max_value:
            return None, (f"rating {rating} lies outside the study's scale "
                          f"{self.min_value} to {self.max_value}; correct it or write n/a")
        return rating, None


@dataclass(frozen=True)
class RatingSettings:
    """Where the study's ratings are; built from the caller's ``ratings`` dict."""

    source: str
    column: str
    condition_column: str
    table: str
    unrated_conditions: tuple

    @classmethod
    def from_dict(cls, ratings: dict | None) -> RatingSettings:
        merged = {**DEFAULT_RATINGS, **(ratings or {})}
        unknown = set(merged) - set(DEFAULT_RATINGS)
        if unknown:
            raise ValueError(f"unknown ratings setting(s): {', '.join(sorted(unknown))}")
        if merged["source"] not in SOURCES:
            raise ValueError(f"ratings source must be one of {SOURCES}, got "
                             f"{merged['source']!r}")
        table = str(merged["table"]).strip("/")
        if merged["source"] == "phenotype" and not re.fullmatch(r"phenotype/[^/]+\.tsv", table):
            raise ValueError(f"ratings table must be phenotype/<name>.tsv, got {table!r}")
        return cls(merged["source"], str(merged["column"]), str(merged["condition_column"]),
                   table, tuple(merged["unrated_conditions"]))


def check_dictionary(dictionary: dict | None, report: Report, *, path: str, column: str,
                     scale: Scale) -> None:
    """Compare a data dictionary's declaration of the rating column with the study's scale.

    The BIDS schema describes columns with ``Minimum``, ``Maximum`` and ``Levels``.
    """
    spec = (dictionary or {}).get(column)
    if not isinstance(spec, dict):
        return
    for key, expected in (("Minimum", scale.min_value), ("Maximum", scale.max_value)):
        if key in spec and as_number(str(spec[key])) != expected:
            report.error(path, f"declares {column} {key} {spec[key]!r}, but the "
                         f"study's scale runs from {scale.min_value} to {scale.max_value}; "
                         "ratings must be given on the study's scale", field=column,
                         code="ratings.scale_mismatch")
    levels = spec.get("Levels")
    if isinstance(levels, dict):
        outside = [key for key in levels if scale.parse(str(key))[1] is not None]
        if outside:
            report.error(path, f"Levels of {column} include {', '.join(outside)}, "
                         f"which are not whole numbers from {scale.min_value} to "
                         f"{scale.max_value}; ratings must use the study's scale",
                         field=column, code="ratings.scale_mismatch")


@dataclass
class Rated:
    """A rating read from a table row, with where it came from."""

    rating: int | None
    condition: str
    path: str
    line: int


def read_rating(row: dict[str, str], *, path: str, line: int, settings: RatingSettings,
                scale: Scale, report: Report) -> Rated:
    """Rating and condition of one table row; bad ratings are reported and become None."""
    condition = row.get(settings.condition_column, "").strip()
    condition = "" if condition == MISSING else condition
    rating, problem = scale.parse(row.get(settings.column, ""))
    if problem:
        report.error(path, problem, line=line, field=settings.column, code="ratings.bad_value")
    return Rated(rating, condition, path, line)


def make_block(*, onset_s: float, duration_s: float | None, rated: Rated | None,
               condition: str, scale: Scale) -> BlockInfo:
    rating = rated.rating if rated else None
    return BlockInfo(onset_s=onset_s, duration_s=duration_s, condition=condition,
                     rating=rating, level=scale.level_of(rating) if rating is not None else None)


@dataclass
class PhenotypeRow:
    line: int
    participant: str
    keys: dict
    rated: Rated


def read_phenotype(tree: Tree, report: Report, *, settings: RatingSettings, scale: Scale,
                   participants: set[str]) -> list[PhenotypeRow] | None:
    """Rows of the phenotype ratings table, checked; None when the table is unusable."""
    path = settings.table
    if not tree.exists(path):
        report.error(path, f"the study takes ratings from {path}, which is not in the upload; "
                     "add the table (with participant_id and the rating column) or ask the "
                     "study lead to change where ratings are read from",
                     code="ratings.missing_table")
        return None
    table = tree.table(path)
    tree.take_problems(report, table)
    if not table.readable:
        return None
    dictionary_path = path[: -len(".tsv")] + ".json"
    if tree.exists(dictionary_path):
        dictionary = tree.json(dictionary_path)
        tree.take_problems(report, dictionary)
        check_dictionary(dictionary.data, report, path=dictionary_path,
                         column=settings.column, scale=scale)
    else:
        report.warn(dictionary_path, f"missing: describe the columns of {path}, including "
                    f"{settings.column} with its Minimum, Maximum and Levels",
                    code="ratings.no_dictionary")
    for column in ("participant_id", settings.column):
        if column not in table.columns:
            report.error(path, f"has no {column} column; the ratings table needs "
                         f"participant_id and {settings.column}", line=1, field=column,
                         code="ratings.missing_column")
            return None
    rows, seen = [], {}
    for line, row in table.rows:
        pid = row["participant_id"].strip()
        label = pid[4:] if pid.startswith("sub-") else None
        if label not in participants:
            report.error(path, f"participant {pid!r} has no sub-*/ folder in the upload; "
                         "correct the id or remove the row", line=line,
                         field="participant_id", code="ratings.unknown_participant")
            continue
        keys = {}
        for column in KEY_COLUMNS:
            value = row.get(column, MISSING).strip()
            if value not in ("", MISSING):
                keys[column] = value.removeprefix("ses-") if column == "session_id" else value
        signature = (label, tuple(sorted(keys.items())))
        if signature in seen:
            report.error(path, f"rates the same participant and block as line "
                         f"{seen[signature]}; keep one row per block", line=line,
                         code="ratings.duplicate")
            continue
        seen[signature] = line
        rated = read_rating(row, path=path, line=line, settings=settings, scale=scale,
                            report=report)
        if not rated.condition and "trial_type" in keys:
            rated.condition = keys["trial_type"]
        rows.append(PhenotypeRow(line, label, keys, rated))
    return rows


def row_matches(row: PhenotypeRow, recording: NameCheck) -> bool:
    """Whether a phenotype row is about a recording (``NameCheck`` entities)."""
    entities = recording.entities
    if row.participant != entities.get("sub"):
        return False
    if "session_id" in row.keys and row.keys["session_id"] != entities.get("ses"):
        return False
    if "task" in row.keys and row.keys["task"] != entities.get("task"):
        return False
    if "run" in row.keys:
        run = entities.get("run")
        if run is None or as_number(row.keys["run"]) != as_number(run):
            return False
    return True
