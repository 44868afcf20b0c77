"""Readers for BIDS TSV tables and JSON sidecars that report problems instead of raising.

Uploads come from many labs and tools; a file with a stray quote, a Windows line ending, a
byte-order mark or the wrong number of values on one line must give the uploader a message
naming the file and line, never a crash of the worker.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from pathlib import Path

from .limits import (
    MAX_JSON_BYTES,
    table_kind,
    table_limit,
    too_large_message,
    too_many_rows_message,
)
from .report import Problem

MAX_LINE_PROBLEMS = 20


@dataclass
class Table:
    """A TSV table: its columns and its rows with their 1-based line numbers (header = 1).

    ``readable`` is False when not even a header could be read; rows that cannot be read
    are left out of ``rows``, counted in ``unread_rows`` and reported in ``errors``.
    """

    path: str
    columns: list = field(default_factory=list)
    rows: list = field(default_factory=list)
    errors: list = field(default_factory=list)
    warnings: list = field(default_factory=list)
    readable: bool = False
    unread_rows: int = 0

    def error(self, message, line=None, field=None, code=""):
        self.errors.append(Problem(self.path, message, line, field, code))

    def warn(self, message, line=None, field=None, code=""):
        self.warnings.append(Problem(self.path, message, line, field, code))


@dataclass
class JsonDocument:
    """A JSON file that must hold one object; ``data`` is None when it could not be read."""

    path: str
    data: dict | None = None
    errors: list = field(default_factory=list)
    warnings: list = field(default_factory=list)

    def error(self, message, line=None, field=None, code=""):
        self.errors.append(Problem(self.path, message, line, field, code))

    def warn(self, message, line=None, field=None, code=""):
        self.warnings.append(Problem(self.path, message, line, field, code))


def _relative(path, relpath):
    return relpath if relpath is not None else Path(path).name


def _size_refused(path, target, *, max_size_bytes, what):
    """Report a file larger than ``max_size_bytes`` (measured before reading); True if so."""
    try:
        size = Path(path).stat().st_size
    except OSError as exc:
        target.error(f"could not be opened ({exc.strerror or exc}); upload it again",
                     code="file.unreadable")
        return True
    if size <= max_size_bytes:
        return False
    target.error(too_large_message(size, max_size_bytes, what), code="file.too_large")
    return True


def _encoding_error(target, exc, *, line, offset):
    target.error(f"holds bytes that are not UTF-8 text (byte {offset + exc.start}); save the "
                 "file with UTF-8 encoding", line=line, code="file.encoding")


def _bom(target, text):
    if text.startswith("\ufeff"):
        target.warn("starts with a byte-order mark; it was ignored, but save the file as "
                    "UTF-8 without one", line=1, code="file.bom")
        return text[1:]
    return text


def _read_text(path, target, *, max_size_bytes):
    """File content as text, or None after reporting why it cannot be text (or is too
    large to read)."""
    if _size_refused(path, target, max_size_bytes=max_size_bytes, what="a JSON sidecar"):
        return None
    try:
        data = Path(path).read_bytes()
    except OSError as exc:
        target.error(f"could not be opened ({exc.strerror or exc}); upload it again",
                     code="file.unreadable")
        return None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        _encoding_error(target, exc, line=data.count(b"\n", 0, exc.start) + 1, offset=0)
        return None
    return _bom(target, text)


def _read_lines(path, target, *, max_rows, max_size_bytes, kind):
    """The lines of a table (without line endings), read one by one and stopped after the
    header and ``max_rows`` rows; None after reporting why they cannot be read."""
    if _size_refused(path, target, max_size_bytes=max_size_bytes, what=f"{kind} tables"):
        return None
    lines, offset = [], 0
    try:
        with open(path, "rb") as handle:
            for number, raw in enumerate(handle, start=1):
                if number > max_rows + 1:
                    target.error(too_many_rows_message(max_rows, kind, number), line=number,
                                 code="file.too_many_rows")
                    return None
                try:
                    line = raw.decode("utf-8")
                except UnicodeDecodeError as exc:
                    _encoding_error(target, exc, line=number, offset=offset)
                    return None
                offset += len(raw)
                lines.append(_bom(target, line) if number == 1 else line)
    except OSError as exc:
        target.error(f"could not be opened ({exc.strerror or exc}); upload it again",
                     code="file.unreadable")
        return None
    return [line.removesuffix("\n").removesuffix("\r") for line in lines]


def split_tsv_line(line: str) -> tuple:
    """Values of one TSV line; a value may be wrapped in double quotes ("" inside = ").

    Returns ``(values, None)`` or ``(values_so_far, what_is_wrong)``.
    """
    values = []
    i, n = 0, len(line)
    while True:
        if i < n and line[i] == '"':
            parts, j = [], i + 1
            while True:
                k = line.find('"', j)
                if k < 0:
                    return values, ("a value opens a double quote that is not closed on the "
                                    "same line")
                parts.append(line[j:k])
                if k + 1 < n and line[k + 1] == '"':
                    parts.append('"')
                    j = k + 2
                    continue
                break
            values.append("".join(parts))
            i = k + 1
            if i == n:
                return values, None
            if line[i] != "\t":
                return values, ("text follows a closing double quote; a quoted value must "
                                "end at a tab or the end of the line")
            i += 1
        else:
            k = line.find("\t", i)
            if k < 0:
                values.append(line[i:])
                return values, None
            values.append(line[i:k])
            i = k + 1


def read_tsv(path: str | os.PathLike, *, relpath: str | None = None, max_rows: int | None = None,
             max_size_bytes: int | None = None) -> Table:
    """Read a BIDS TSV file into a :class:`Table`; never raises on bad content.

    ``max_rows`` and ``max_size_bytes`` bound what is read (defaults by the kind of table,
    from :mod:`cairn_science.bids.limits`): the size is checked before reading and reading stops
    after ``max_rows`` rows; a table past either limit is reported and left unreadable.
    """
    table = Table(_relative(path, relpath))
    limit = table_limit(table.path)
    lines = _read_lines(path, table, kind=table_kind(table.path),
                        max_rows=limit.max_rows if max_rows is None else max_rows,
                        max_size_bytes=(limit.max_size_bytes if max_size_bytes is None
                                        else max_size_bytes))
    if lines is None:
        return table
    if not lines or not lines[0].strip():
        table.error("is empty; a table needs a header line with its column names",
                    line=1, code="tsv.empty")
        return table
    if "\x00" in lines[0]:
        table.error("header line holds NUL bytes; save the file as plain UTF-8 text",
                    line=1, code="tsv.nul")
        return table
    columns, problem = split_tsv_line(lines[0])
    if problem:
        table.error(f"header line cannot be read: {problem}", line=1, code="tsv.quote")
        return table
    stripped = [name.strip() for name in columns]
    for name, clean in zip(columns, stripped, strict=True):
        if name != clean and clean:
            table.warn(f"column name {name!r} has spaces around it; use {clean!r}", line=1,
                       field=clean, code="tsv.column_spaces")
    if any(not name for name in stripped):
        table.error("header has an empty column name; name every column or remove the "
                    "extra tab", line=1, code="tsv.empty_column")
    seen = set()
    for name in stripped:
        if name and name in seen:
            table.error(f"column {name!r} appears twice in the header; keep one", line=1,
                        field=name, code="tsv.duplicate_column")
        seen.add(name)
    table.columns = stripped
    table.readable = True
    bad_lines = 0
    for number, line in enumerate(lines[1:], start=2):
        problem = None
        if not line.strip():
            table.warn("empty line; remove it", line=number, code="tsv.blank_line")
            continue
        if "\x00" in line:
            problem = ("holds NUL bytes; save the file as plain UTF-8 text", "tsv.nul")
        else:
            values, quote_problem = split_tsv_line(line)
            if quote_problem:
                problem = (quote_problem, "tsv.quote")
            elif len(values) != len(stripped):
                problem = (f"has {len(values)} values but the header has {len(stripped)} "
                           "columns; separate values with single tabs and write n/a for "
                           "missing ones", "tsv.column_count")
        if problem:
            bad_lines += 1
            if bad_lines <= MAX_LINE_PROBLEMS:
                table.error(problem[0], line=number, code=problem[1])
            continue
        table.rows.append((number, dict(zip(stripped, values, strict=True))))
    table.unread_rows = bad_lines
    if bad_lines > MAX_LINE_PROBLEMS:
        table.error(f"{bad_lines - MAX_LINE_PROBLEMS} more lines have problems like the ones "
                    "above", code="tsv.more_lines")
    return table


class _DuplicateKeys:
    """``object_pairs_hook`` that remembers keys given twice in one JSON object."""

    def __init__(self):
        self.duplicates = {}

    def __call__(self, pairs):
        result = {}
        for key, value in pairs:
            if key in result:
                differs = self.duplicates.get(key, False) or result[key] != value
                self.duplicates[key] = differs
            result[key] = value
        return result


def _json_kind(value):
    if isinstance(value, list):
        return "an array"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, bool) or value is None:
        return f"the literal {json.dumps(value)}"
    return "a number"


def _reject_constant(name):
    raise ValueError(f"{name} is not allowed in JSON")


def read_json(path: str | os.PathLike, *, relpath: str | None = None,
              max_size_bytes: int = MAX_JSON_BYTES) -> JsonDocument:
    """Read a JSON sidecar that must hold one object; never raises on bad content. A file
    larger than ``max_size_bytes`` is reported without being read."""
    document = JsonDocument(_relative(path, relpath))
    text = _read_text(path, document, max_size_bytes=max_size_bytes)
    if text is None:
        return document
    if not text.strip():
        document.error("is empty; it must hold one JSON object, at least {}", line=1,
                       code="json.empty")
        return document
    hook = _DuplicateKeys()
    try:
        data = json.loads(text, object_pairs_hook=hook, parse_constant=_reject_constant)
    except json.JSONDecodeError as exc:
        document.error(f"is not valid JSON ({exc.msg}, line {exc.lineno} column {exc.colno}); "
                       "fix the syntax", line=exc.lineno, code="json.syntax")
        return document
    except (ValueError, RecursionError) as exc:
        document.error(f"is not valid JSON ({exc}); fix the content", code="json.syntax")
        return document
    if not isinstance(data, dict):
        document.error(f"must hold one JSON object ({{...}}) but holds "
                       f"{_json_kind(data)}", code="json.not_object")
        return document
    for key, differs in hook.duplicates.items():
        if differs:
            document.error(f"key {key!r} is given more than once with different values, so "
                           "it is unclear which one holds; keep one", field=key,
                           code="json.duplicate_key")
        else:
            document.warn(f"key {key!r} is given more than once (with the same value); keep "
                          "one", field=key, code="json.duplicate_key")
    document.data = data
    return document
