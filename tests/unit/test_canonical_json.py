"""The one canonical-JSON/sha256 helper and the import-cheap code versions (no Django)."""

import hashlib
import json
import math
import subprocess
import sys

import pytest

from cairn_science.canonical_json import (
    canonical_bytes,
    canonical_sha256,
    canonical_text,
    without_negative_zero,
)

#: Values with what tends to go wrong: key order, nesting, non-ASCII, negative zero, floats
#: that print in exponent form, empty containers, booleans next to numbers.
AWKWARD = [
    {"b": 1, "a": [True, None, "é"], "c": -0.5},
    {"z": [1, 2.5, -0.0, None, True, False], "name": "Ångström µV", "a": {"y": 1e-7, "x": "Fz"}},
    {"": {}, "list": [], "tuple": (1, 2), "big": 10**20, "small": 5e-324, "quote": 'a"b\\c'},
    {"\uff61": 1, "\U0001f600": 2, "A": 3, "a": 4},
    ["top", "level", "list", {"k": -0.0}],
    "just a string",
    0.1 + 0.2,
]


def test_hand_worked_example():
    # Worked by hand: keys sorted, no spaces, "é" (U+00E9) kept and written as UTF-8 c3 a9
    # (Unicode Standard, UTF-8 encoding form).
    value = {"b": 1, "a": [True, None, "é"], "c": -0.5}
    expected = b'{"a":[true,null,"\xc3\xa9"],"b":1,"c":-0.5}'
    assert canonical_bytes(value) == expected
    assert canonical_text(value) == expected.decode("utf-8")
    assert canonical_sha256(value) == hashlib.sha256(expected).hexdigest()


def test_ascii_option_escapes_as_json_allows():
    # RFC 8259 section 7: any character may be escaped as \u followed by four hex digits.
    assert canonical_bytes({"a": "é"}, ascii=True) == b'{"a":"\\u00e9"}'
    assert json.loads(canonical_bytes({"a": "é"}, ascii=True)) == {"a": "é"}


def test_nan_and_infinity_are_refused_unless_asked_for():
    for bad in (math.nan, math.inf, -math.inf):
        with pytest.raises(ValueError):
            canonical_bytes({"x": [bad]})
    assert canonical_bytes({"x": math.nan}, allow_nan=True) == b'{"x":NaN}'


def test_not_json_is_a_type_error():
    with pytest.raises(TypeError):
        canonical_bytes({"x": {1, 2}})


def test_this_is_not_rfc_8785():
    # RFC 8785 section 3.2.3 sorts keys by UTF-16 code units, where U+1F600 (surrogates
    # D83D DE00) comes before U+FF61; this form sorts by code point, so U+FF61 comes first.
    # RFC 8785 section 3.2.2.3 writes 1.0 as "1"; this form writes "1.0".
    text = canonical_text({"\U0001f600": 2, "\uff61": 1})
    assert text.index("\uff61") < text.index("\U0001f600")
    assert canonical_text(1.0) == "1.0"


def test_without_negative_zero():
    value = {"a": -0.0, "b": [(-0.0, 1.0)], "c": 0, "d": "-0.0"}
    cleaned = without_negative_zero(value)
    assert cleaned == {"a": 0.0, "b": [[0.0, 1.0]], "c": 0, "d": "-0.0"}
    assert math.copysign(1.0, cleaned["a"]) == 1.0
    assert math.copysign(1.0, cleaned["b"][0][0]) == 1.0
    assert math.copysign(1.0, value["a"]) == -1.0  # the input is not changed


@pytest.mark.parametrize("value", AWKWARD)
def test_same_bytes_as_each_former_copy(value):
    """Every copy the helper replaced, written out as it was, gives the same bytes, so no
    stored hash changes."""
    utf8 = canonical_bytes(value, allow_nan=True)
    # studies.protocol_digest, features.canonical_digest, audit lineage parameters:
    assert json.dumps(value, sort_keys=True, separators=(",", ":"),
                      ensure_ascii=False).encode("utf-8") == utf8
    # quality.settings_digest and cairn_science.qc.settings.QCSettings.digest:
    assert json.dumps(value, sort_keys=True, separators=(",", ":")).encode() == \
        canonical_bytes(value, ascii=True, allow_nan=True)
    # audit chain links (strict):
    assert json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      allow_nan=False).encode("utf-8") == canonical_bytes(value)


def test_qc_settings_digest_unchanged():
    from cairn_science.qc.settings import QCSettings

    settings = QCSettings()
    former = hashlib.sha256(json.dumps(settings.as_dict(), sort_keys=True,
                                       separators=(",", ":")).encode("utf-8")).hexdigest()
    assert settings.digest() == former


HEAVY = ("numpy", "scipy", "mne", "sklearn", "pandas", "django", "celery")


@pytest.mark.parametrize("module", ["cairn_science.versions", "cairn_science.canonical_json"])
def test_import_is_cheap(module):
    code = (f"import sys, {module}; "
            f"print(','.join(m for m in {HEAVY!r} if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.strip()
    assert out == "", f"importing {module} loaded {out}"


def test_code_versions_are_written_only_in_the_one_module():
    """No module assigns a string to a ``*CODE_VERSION`` name except cairn_science/versions.py
    (the copies kept equal by tests are gone)."""
    import ast
    from pathlib import Path

    from cairn_science import versions

    root = Path(versions.__file__).resolve().parents[1]
    found = []
    for folder in ("cairn_science", "portal"):
        for path in (root / folder).rglob("*.py"):
            for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
                if (isinstance(node, ast.Assign) and isinstance(node.value, ast.Constant)
                        and isinstance(node.value.value, str)
                        and any(isinstance(t, ast.Name) and t.id.endswith("CODE_VERSION")
                                for t in node.targets)):
                    found.append(str(path.relative_to(root)))
    assert found == ["cairn_science/versions.py"] * 3
