"""Every defect of the broken corpus (fixtures.broken_bids) is refused with a message that
names the file, the field where there is one, and the defect."""

import shutil
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cairn_science.bids.deid import scrub_dataset
from cairn_science.bids.ratings import DEFAULT_SCALE
from cairn_science.bids.validate import validate_dataset
from fixtures.broken_bids import BROKEN_CASES, RECORDINGS, build_case, build_clean_dataset


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    return build_clean_dataset(tmp_path_factory.mktemp("broken-corpus") / "clean")


def test_clean_dataset_passes(clean):
    """The corpus' base dataset, written with mne-bids, is accepted with ratings on its two
    task runs and an unrated baseline (common practice, no source)."""
    report = validate_dataset(clean)
    assert report.ok, report.errors
    bins = {level["name"]: (level["min"], level["max"]) for level in DEFAULT_SCALE["levels"]}
    expected = {}
    for task, run, condition, rating in RECORDINGS:
        level = next((name for name, (low, high) in bins.items()
                      if rating is not None and low <= rating <= high), None)
        expected[(task, str(run or ""))] = (condition, rating, level)
    assert {(info.task, info.run): (info.condition, info.rating, info.level)
            for info in report.recordings} == expected


def test_corpus_covers_enough_defects():
    """At least 25 distinct defects, each with a unique name (common practice, no source)."""
    names = [case.name for case in BROKEN_CASES]
    assert len(names) >= 25 and len(set(names)) == len(names)


@pytest.mark.parametrize("case", BROKEN_CASES, ids=[case.name for case in BROKEN_CASES])
def test_defect_is_refused_naming_file_field_and_defect(case, clean, tmp_path):
    """The broken copy is refused; one error names the file, the field and the defect."""
    root = build_case(case, clean, tmp_path)
    report = validate_dataset(root)
    assert not report.ok
    matching = [
        error for error in report.errors
        if case.expect_path in error.path
        and (case.expect_field is None or error.field == case.expect_field)
        and all(word in error.message.lower() for word in case.expect_words)
    ]
    assert matching, [(e.path, e.field, e.message) for e in report.errors]


@settings(max_examples=25, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_any_corruption_is_reported_not_raised(clean, data):
    """Random bytes written over, cut from or inserted into any file of the clean dataset
    never make validation or scrubbing raise (common practice, no source)."""
    files = sorted(p.relative_to(clean).as_posix() for p in clean.rglob("*") if p.is_file())
    with tempfile.TemporaryDirectory() as folder:
        root = Path(folder) / "bids"
        shutil.copytree(clean, root)
        target = root / data.draw(st.sampled_from(files))
        content = target.read_bytes()
        start = data.draw(st.integers(0, len(content)))
        stop = data.draw(st.integers(start, min(len(content), start + 64)))
        target.write_bytes(content[:start] + data.draw(st.binary(max_size=64)) + content[stop:])
        report = validate_dataset(root)
        assert all(problem.path and problem.message for problem in report.errors)
        scrub_dataset(root)
        validate_dataset(root, deid="scrub").as_dict()
