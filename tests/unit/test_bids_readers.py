"""The TSV and JSON readers never raise: every failure comes back as a problem naming the file."""

import json
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cairn_science.bids.readers import read_json, read_tsv, split_tsv_line

RELPATH = "sub-01/eeg/sub-01_task-x_channels.tsv"
FUZZ = settings(max_examples=150, deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture])


def _read(reader, content):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "file"
        path.write_bytes(content)
        return reader(path, relpath=RELPATH)


def _assert_named(document):
    for problem in document.errors + document.warnings:
        assert problem.path == RELPATH
        assert problem.message
        assert problem.line is None or problem.line >= 1


@FUZZ
@given(st.binary(max_size=2000))
def test_tsv_reader_takes_any_bytes(content):
    """Arbitrary bytes give a table or problems, never an exception (common practice, no
    source)."""
    table = _read(read_tsv, content)
    _assert_named(table)
    assert table.readable or table.errors
    for line, row in table.rows:
        assert line >= 2 and list(row) == table.columns


@FUZZ
@given(st.text(alphabet=st.sampled_from('ab\t\n\r"\x00\ufeff n/a1.'), max_size=400))
def test_tsv_reader_takes_any_text_of_tsv_characters(text):
    """Text made of tabs, quotes, line breaks, NULs and byte-order marks never raises, and
    rows that cannot be read are reported with their line (common practice, no source)."""
    table = _read(read_tsv, text.encode("utf-8"))
    _assert_named(table)
    for problem in table.errors:
        if problem.code in ("tsv.column_count", "tsv.quote", "tsv.nul") and problem.line:
            assert problem.line not in {line for line, _ in table.rows}


@FUZZ
@given(st.lists(st.lists(st.text(alphabet=st.characters(blacklist_categories=("Cs",),
                                                         blacklist_characters="\t\n\r\"\x00"),
                                  min_size=1, max_size=8).filter(str.strip),
                         min_size=3, max_size=3), min_size=1, max_size=6))
def test_tsv_round_trip(rows):
    """A table written with one tab between values and a final newline reads back unchanged
    (BIDS tabular files: tab-separated, header line first)."""
    header = ["name", "type", "units"]
    text = "\n".join("\t".join(row) for row in [header, *rows]) + "\n"
    table = _read(read_tsv, text.encode("utf-8"))
    assert table.errors == []
    assert [list(row.values()) for _, row in table.rows] == rows


@FUZZ
@given(st.binary(max_size=2000))
def test_json_reader_takes_any_bytes(content):
    """Arbitrary bytes give an object or problems, never an exception (common practice, no
    source)."""
    document = _read(read_json, content)
    _assert_named(document)
    assert (document.data is not None) or document.errors


@FUZZ
@given(st.recursive(st.none() | st.booleans() | st.integers() | st.text(max_size=5),
                    lambda inner: st.lists(inner, max_size=3)
                    | st.dictionaries(st.text(max_size=3), inner, max_size=3),
                    max_leaves=10))
def test_json_reader_accepts_objects_only(value):
    """Valid JSON is accepted only when it is an object (BIDS sidecars are JSON objects)."""
    document = _read(read_json, json.dumps(value).encode("utf-8"))
    _assert_named(document)
    if isinstance(value, dict):
        assert document.data == value and document.errors == []
    else:
        assert document.data is None and document.errors[0].code == "json.not_object"


@pytest.mark.parametrize(("content", "code", "line"), [
    (b"", "tsv.empty", 1),
    (b"\n\n", "tsv.empty", 1),
    (b"name\ttype\tunits\nFz\tEEG\n", "tsv.column_count", 2),
    (b'name\ttype\tunits\n"Fz\tEEG\tuV\n', "tsv.quote", 2),
    (b'name\ttype\tunits\n"Fz"x\tEEG\tuV\n', "tsv.quote", 2),
    (b"name\ttype\tunits\nF\x00z\tEEG\tuV\n", "tsv.nul", 2),
    (b"name\ttype\tunits\nFz\tEEG\tuV\n\xff\xfe\tEEG\tuV\n", "file.encoding", 3),
    (b"name\tname\tunits\nFz\tEEG\tuV\n", "tsv.duplicate_column", 1),
    (b"name\t\tunits\nFz\tEEG\tuV\n", "tsv.empty_column", 1),
])
def test_tsv_defects_are_reported_with_their_line(content, code, line):
    """Each defect is an error with a code and the line it is on (header = line 1)."""
    table = _read(read_tsv, content)
    problem = next(problem for problem in table.errors if problem.code == code)
    assert problem.line == line and problem.path == RELPATH


def test_tsv_bom_crlf_and_quoted_values_are_read():
    """A byte-order mark is dropped with a warning, CRLF line ends are accepted, and a value
    in double quotes may hold a tab ("" stands for one quote)."""
    table = _read(read_tsv, b'\xef\xbb\xbfname\tdescription\r\nFz\t"midline\tfrontal ""Fz"""\r\n')
    assert table.errors == []
    assert [problem.code for problem in table.warnings] == ["file.bom"]
    assert table.rows == [(2, {"name": "Fz", "description": 'midline\tfrontal "Fz"'})]


def test_split_line_keeps_empty_values():
    """Empty values between tabs and at the end are kept, so counts stay right."""
    assert split_tsv_line("a\t\tb\t") == (["a", "", "b", ""], None)


@pytest.mark.parametrize(("content", "code", "severity"), [
    (b"", "json.empty", "errors"),
    (b'{"a": 1,}', "json.syntax", "errors"),
    (b"[1, 2]", "json.not_object", "errors"),
    (b'"text"', "json.not_object", "errors"),
    (b'{"a": NaN}', "json.syntax", "errors"),
    (b'{"a": 1, "a": 2}', "json.duplicate_key", "errors"),
    (b'{"a": 1, "a": 1}', "json.duplicate_key", "warnings"),
    (b'\xef\xbb\xbf{"a": 1}', "file.bom", "warnings"),
    (b'{"a": "\xff"}', "file.encoding", "errors"),
    (b"[" * 100000, "json.syntax", "errors"),
])
def test_json_defects_are_reported(content, code, severity):
    """Bad JSON, non-objects, NaN, duplicate keys (an error only when their values differ),
    byte-order marks and non-UTF-8 bytes each give a coded problem (JSON as RFC 8259 defines
    it; BIDS sidecars are UTF-8 JSON objects)."""
    document = _read(read_json, content)
    assert code in [problem.code for problem in getattr(document, severity)]
