"""The difference of two specs, field by field (plumbing: invented specs)."""

from portal.audit.diff import json_diff


def test_changes_additions_and_removals_by_path():
    left = {"seed": 3, "models": [{"learner": "lda"}, {"learner": "svm"}],
            "validation": {"scheme": "loso"}, "label": {"kind": "level"}}
    right = {"seed": 4, "models": [{"learner": "lda"}], "validation": {"scheme": "loso",
             "n_splits": 5}, "label": {"kind": "level"}}
    rows = json_diff(left, right)
    assert [(r["path"], r["change"]) for r in rows] == [
        ("models[1]", "removed"), ("seed", "changed"), ("validation.n_splits", "added")]
    assert rows[1]["left"] == 3 and rows[1]["right"] == 4


def test_equal_documents_and_number_types():
    spec = {"a": [1, 2, {"b": None}], "c": "x"}
    assert json_diff(spec, spec) == []
    assert json_diff({"x": 1}, {"x": 1.0}) == []
    assert json_diff({"x": True}, {"x": 1}) == [
        {"path": "x", "change": "changed", "left": True, "right": 1}]
    assert json_diff({"x": None}, {}) == [
        {"path": "x", "change": "removed", "left": None, "right": None}]


def test_content_hash_is_the_same_after_the_database_drops_negative_zero():
    """PostgreSQL's JSON numbers have no negative zero (checked here with psql:
    '{"a": -0.0}'::jsonb gives {"a": 0.0}), so the hash of a stored result must not depend
    on the sign of a zero."""
    from portal.audit.events import canonical_sha256

    assert canonical_sha256({"a": [-0.0, 1.5]}) == canonical_sha256({"a": [0.0, 1.5]})
    assert canonical_sha256({"a": 1.0}) != canonical_sha256({"a": 1.5})
