"""Canonical JSON and its sha256: the one place Cairn turns a JSON-ready value into the bytes
it hashes (event contents, audit chain links, quality settings, feature parameters, training
specs, study protocols).

The canonical form is Python's ``json.dumps`` with sorted keys and no whitespace
(``separators=(",", ":")``), encoded as UTF-8, and by default with non-ASCII characters kept
as they are and NaN/infinity refused. This is *not* RFC 8785 (JSON Canonicalization Scheme):
RFC 8785 sorts keys by UTF-16 code units and writes numbers the ECMAScript way (``1.0`` as
``1``), while this form sorts by code point and writes floats as Python's ``repr`` does
(``1.0``). Hashes already stored were made with this form, so it must not change.

Two options exist only because some stored hashes were made with them and must stay equal:
``ascii=True`` escapes non-ASCII characters as ``\\uXXXX`` (quality settings digests) and
``allow_nan=True`` writes NaN/infinity as ``NaN``/``Infinity`` instead of refusing them
(feature parameters, training specs, protocols, lineage parameters).
"""

import hashlib
import json

__all__ = ["canonical_bytes", "canonical_sha256", "canonical_text", "without_negative_zero"]


def canonical_text(value, *, ascii=False, allow_nan=False):
    """The canonical JSON text of ``value`` (sorted keys, no whitespace).

    Raises ``ValueError`` for NaN or infinity unless ``allow_nan``, and ``TypeError`` for a
    value JSON cannot hold (a set, bytes, an object)."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=ascii,
                      allow_nan=allow_nan)


def canonical_bytes(value, *, ascii=False, allow_nan=False):
    """The canonical JSON of ``value`` as UTF-8 bytes."""
    return canonical_text(value, ascii=ascii, allow_nan=allow_nan).encode("utf-8")


def canonical_sha256(value, *, ascii=False, allow_nan=False):
    """Hex sha256 of :func:`canonical_bytes`."""
    return hashlib.sha256(canonical_bytes(value, ascii=ascii, allow_nan=allow_nan)).hexdigest()


def without_negative_zero(value):
    """``value`` with every float -0.0 replaced by 0.0, through dicts, lists and tuples
    (tuples become lists, as JSON has them). PostgreSQL's JSON numbers have no negative zero,
    so this is the value as the database gives it back."""
    if isinstance(value, float) and value == 0.0:
        return 0.0
    if isinstance(value, dict):
        return {key: without_negative_zero(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [without_negative_zero(item) for item in value]
    return value
