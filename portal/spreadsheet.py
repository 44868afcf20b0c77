"""Cells that a spreadsheet would run as a formula, made inert before any CSV/TSV export.

OWASP's CSV-injection guidance: a cell beginning with ``=``, ``+``, ``-``, ``@``, a tab or a
carriage return may be evaluated as a formula when the file is opened in a spreadsheet;
prefix such a cell with a single quote so it is shown as text. Plain numbers (``-0.5``,
``+3e-6``) are left alone: they cannot execute and must stay numbers for analysis. Quoting of
separators and quotes is left to the ``csv`` module.
"""

import re

TRIGGERS = ("=", "+", "-", "@", "\t", "\r")
_NUMBER = re.compile(r"[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?")


def safe_cell(value):
    """``value`` as a spreadsheet shows it literally (non-text values are returned as they are)."""
    if not isinstance(value, str) or not value.startswith(TRIGGERS):
        return value
    if _NUMBER.fullmatch(value):
        return value
    return "'" + value


def safe_row(values):
    return [safe_cell(v) for v in values]


def safe_frame(frame):
    """A copy of a pandas frame with every text column's cells made inert."""
    out = frame.copy()
    for column in out.columns:
        if out[column].dtype == object or str(out[column].dtype) in ("string", "str",
                                                                    "category"):
            out[column] = out[column].astype(object).map(safe_cell)
    return out
