"""The inheritance principle: which metadata files apply to a data file, and their merge.

A metadata file applies to a data file when it sits in the data file's folder or above it,
has the same suffix and extension, and its entities are a subset of the data file's. JSON
files merge from the top down (deeper values win); a table (channels.tsv, events.tsv)
comes from the deepest folder that has one. Two applicable files in one folder are an error,
because nothing says which one wins.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

from .limits import table_limit
from .names import NameCheck, check_path, walk_dataset
from .readers import JsonDocument, Table, read_json, read_tsv

if TYPE_CHECKING:
    from .limits import TableLimit
    from .report import Report


@dataclass
class Applicable:
    """Metadata files that apply to one data file, folder by folder from the top down."""

    levels: list = field(default_factory=list)

    @property
    def paths(self) -> list[str]:
        return [path for level in self.levels for path in level]


class Tree:
    """The accepted files of a dataset, indexed by folder, with cached reads.

    Each JSON or TSV file is read once however many data files it applies to, and its
    reading problems are handed out once (``take_problems``). ``table_limits`` maps kinds of
    table (channels, events, ...) to other :class:`~cairn_science.bids.limits.TableLimit` values.
    """

    def __init__(self, root: str | os.PathLike, checks: list[NameCheck], *,
                 table_limits: dict[str, TableLimit] | None = None):
        self.root = Path(root)
        self.table_limits = table_limits
        self.checks = {check.path: check for check in checks}
        self.by_folder = {}
        for check in checks:
            if check.ok:
                self.by_folder.setdefault(check.folder, []).append(check)
        self._json = {}
        self._tables = {}
        self._reported = set()
        self._clashes = set()

    @classmethod
    def from_root(cls, root: str | os.PathLike, *,
                  table_limits: dict[str, TableLimit] | None = None) -> Tree:
        """Index a dataset folder by walking it and checking every name."""
        return cls(root, [check_path(path) for path in walk_dataset(root).files],
                   table_limits=table_limits)

    def exists(self, path: str) -> bool:
        return path in self.checks

    def json(self, path: str) -> JsonDocument:
        if path not in self._json:
            self._json[path] = read_json(self.root / path, relpath=path)
        return self._json[path]

    def table(self, path: str) -> Table:
        if path not in self._tables:
            limit = table_limit(path, self.table_limits)
            self._tables[path] = read_tsv(self.root / path, relpath=path,
                                          max_rows=limit.max_rows,
                                          max_size_bytes=limit.max_size_bytes)
        return self._tables[path]

    def take_problems(self, report: Report, document: JsonDocument | Table) -> None:
        """Copy a document's reading problems into the report the first time it is used."""
        if document.path not in self._reported:
            self._reported.add(document.path)
            report.absorb(document)

    def applicable(self, data: NameCheck, *, suffix: str, extension: str) -> Applicable:
        """Files with ``suffix``/``extension`` that apply to the data file ``data``."""
        result = Applicable()
        parts = data.folder.split("/") if data.folder else []
        for depth in range(len(parts) + 1):
            folder = "/".join(parts[:depth])
            found = sorted(
                candidate.path
                for candidate in self.by_folder.get(folder, ())
                if candidate.suffix == suffix
                and candidate.extension == extension
                and candidate.path != data.path
                and _subset(candidate, data)
            )
            if found:
                result.levels.append(found)
        return result

    def merged_json(self, data: NameCheck, *, suffix: str,
                    report: Report) -> tuple[dict, list[str], Applicable]:
        """Merged JSON metadata of ``suffix`` for a data file, and the files it came from.

        Reading problems of each file and same-folder clashes are added to ``report``.
        """
        found = self.applicable(data, suffix=suffix, extension=".json")
        self._report_clashes(
            [level for level in found.levels if len(level) > 1], report,
            what=f"_{suffix}.json sidecars",
        )
        merged, sources = {}, []
        for path in found.paths:
            document = self.json(path)
            self.take_problems(report, document)
            if document.data is not None:
                merged.update(document.data)
                sources.append(path)
        return merged, sources, found

    def closest_table(self, data: NameCheck, *, suffix: str, report: Report) -> str | None:
        """Path of the deepest applicable ``_<suffix>.tsv`` of a data file, or None."""
        found = self.applicable(data, suffix=suffix, extension=".tsv")
        if not found.levels:
            return None
        deepest = found.levels[-1]
        self._report_clashes([deepest] if len(deepest) > 1 else [], report,
                             what=f"_{suffix}.tsv files")
        return deepest[-1]

    def _report_clashes(self, clashes, report, *, what):
        for paths in clashes:
            if tuple(paths) in self._clashes:
                continue
            self._clashes.add(tuple(paths))
            for path in paths:
                others = ", ".join(p.rpartition("/")[2] for p in paths if p != path)
                report.error(path, f"this and {others} are {what} in the same folder that "
                             "both apply to the same recordings, so neither clearly wins; "
                             "merge them into one file or give them different entities",
                             code="inheritance.clash")


def _subset(candidate: NameCheck, data: NameCheck):
    return all(data.entities.get(key) == value for key, value in candidate.entities.items())
