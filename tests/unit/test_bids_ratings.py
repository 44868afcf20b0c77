"""Workload ratings from scans.tsv or a phenotype table, checked against the study's scale,
and indexed as blocks (whole recordings, or events inside one continuous recording)."""

import datetime
import json
import shutil

import pytest

from cairn_science.bids.ratings import RatingSettings, Scale
from cairn_science.bids.validate import validate_dataset
from fixtures.broken_bids import SCANS, build_clean_dataset

BLOCKS = (("rest", 0.0, 10.0), ("low", 10.0, 10.0), ("high", 20.0, 10.0))
PHENOTYPE = "phenotype/workload.tsv"
SETTINGS = {"source": "phenotype", "table": PHENOTYPE}


def _write_table(path, rows):
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("\n".join("\t".join(row) for row in rows) + "\n", encoding="utf-8")


@pytest.fixture(scope="module")
def continuous(tmp_path_factory):
    """Two participants, each with one continuous recording holding three block events."""
    import mne
    import mne_bids
    import numpy as np

    root = tmp_path_factory.mktemp("continuous") / "bids"
    rng = np.random.default_rng(3)
    for subject in ("01", "02"):
        info = mne.create_info(["Fz", "Cz", "Pz", "Oz"], 100.0, "eeg")
        raw = mne.io.RawArray(rng.normal(scale=1e-5, size=(4, 3000)), info, verbose=False)
        raw.set_meas_date(datetime.datetime(2024, 1, 8, 9, tzinfo=datetime.UTC))
        raw.info["line_freq"] = 50.0
        raw.set_annotations(mne.Annotations([b[1] for b in BLOCKS], [b[2] for b in BLOCKS],
                                            [b[0] for b in BLOCKS]))
        bids_path = mne_bids.BIDSPath(root=root, subject=subject, session="1", task="blocks",
                                      datatype="eeg", suffix="eeg", extension=".edf")
        mne_bids.write_raw_bids(raw, bids_path, format="EDF", allow_preload=True,
                                overwrite=True, verbose=False)
    (root / "phenotype").mkdir()
    (root / "phenotype" / "workload.json").write_text(json.dumps({
        "workload_rating": {"Description": "Rating after each block", "Minimum": 1,
                            "Maximum": 9}}), encoding="utf-8")
    return root


@pytest.fixture
def tree(continuous, tmp_path):
    root = tmp_path / "bids"
    shutil.copytree(continuous, root)
    return root


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    return build_clean_dataset(tmp_path_factory.mktemp("runs") / "clean")


def test_blocks_inside_a_continuous_recording(tree):
    """Events whose trial_type the phenotype table rates become blocks with their onset,
    duration, rating and level; the rest event is an unrated block (events.tsv onset and
    duration in seconds, as the BIDS standard defines them)."""
    _write_table(tree / PHENOTYPE, [
        ("participant_id", "session_id", "task", "trial_type", "workload_rating"),
        ("sub-01", "ses-1", "blocks", "low", "2"),
        ("sub-01", "ses-1", "blocks", "high", "8"),
        ("sub-02", "ses-1", "blocks", "low", "5"),
        ("sub-02", "ses-1", "blocks", "high", "n/a"),
    ])
    report = validate_dataset(tree, ratings=SETTINGS)
    assert report.ok, report.errors
    scale = Scale.from_dict(None)
    ratings = {("01", "low"): 2, ("01", "high"): 8, ("02", "low"): 5, ("02", "high"): None}
    for info in report.recordings:
        assert [(b.condition, b.onset_s, b.duration_s) for b in info.blocks] == list(BLOCKS)
        for block in info.blocks:
            rating = ratings.get((info.participant, block.condition))
            assert block.rating == rating
            assert block.level == (scale.level_of(rating) if rating is not None else None)
        assert info.rating is None and info.condition == ""
    (warning,) = [p for p in report.warnings if p.code == "ratings.missing"]
    assert (warning.path, warning.line, warning.field) == (PHENOTYPE, 5, "workload_rating")


def test_phenotype_rating_out_of_range_names_file_line_field(tree):
    """A rating outside the scale is an error with the table, its line and the column."""
    _write_table(tree / PHENOTYPE, [
        ("participant_id", "session_id", "trial_type", "workload_rating"),
        ("sub-01", "ses-1", "low", "2"),
        ("sub-01", "ses-1", "high", "11"),
    ])
    report = validate_dataset(tree, ratings=SETTINGS)
    (error,) = [p for p in report.errors if p.code == "ratings.bad_value"]
    assert (error.path, error.line, error.field) == (PHENOTYPE, 3, "workload_rating")
    assert "11" in error.message and "1 to 9" in error.message


def test_row_without_session_matching_two_sessions_is_ambiguous(tree):
    """Without session_id, a row that fits recordings of two sessions is an error."""
    for path in (tree / "sub-01" / "ses-1").rglob("*"):
        if path.is_file():
            target = tree / "sub-01" / "ses-2" / path.relative_to(tree / "sub-01" / "ses-1")
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_bytes(path.read_bytes())
            target.rename(target.with_name(target.name.replace("ses-1", "ses-2")))
    scans = tree / "sub-01" / "ses-2" / "sub-01_ses-2_scans.tsv"
    scans.write_text(scans.read_text(encoding="utf-8").replace("ses-1", "ses-2"),
                     encoding="utf-8")
    _write_table(tree / PHENOTYPE, [
        ("participant_id", "trial_type", "workload_rating"),
        ("sub-01", "low", "2"),
    ])
    report = validate_dataset(tree, ratings=SETTINGS)
    assert any(p.code == "ratings.ambiguous" and p.path == PHENOTYPE and p.line == 2
               and p.field == "session_id" for p in report.errors)


def test_missing_phenotype_table_is_an_error(tree):
    """When the study reads ratings from a phenotype table, its absence is an error."""
    report = validate_dataset(tree, ratings=SETTINGS)
    assert any(p.path == PHENOTYPE and p.code == "ratings.missing_table"
               for p in report.errors)


def test_phenotype_rows_rate_whole_recordings_by_task_and_run(runs, tmp_path):
    """Rows keyed by participant, session, task and run rate separate recordings; each is one
    block from 0 s over its whole duration."""
    root = tmp_path / "runs"
    shutil.copytree(runs, root)
    _write_table(root / PHENOTYPE, [
        ("participant_id", "session_id", "task", "run", "workload_rating", "difficulty"),
        ("sub-01", "ses-01", "workload", "1", "3", "low"),
        ("sub-01", "ses-01", "workload", "2", "9", "high"),
    ])
    report = validate_dataset(root, ratings=SETTINGS)
    assert report.ok, report.errors
    by_run = {info.run: info for info in report.recordings if info.task == "workload"}
    assert (by_run["1"].rating, by_run["1"].condition, by_run["1"].level) == (3, "low", "low")
    assert (by_run["2"].rating, by_run["2"].condition, by_run["2"].level) == (9, "high", "high")
    for info in report.recordings:
        (block,) = info.blocks
        assert block.onset_s == 0 and block.duration_s == info.duration_s


def test_dictionary_levels_outside_the_scale(runs, tmp_path):
    """A data dictionary whose Levels for the rating column leave the study's scale is an
    error on the JSON file and column (BIDS schema: columns are described with Levels,
    Minimum and Maximum)."""
    root = tmp_path / "runs"
    shutil.copytree(runs, root)
    dictionary = root / SCANS.replace(".tsv", ".json")
    content = json.loads(dictionary.read_text(encoding="utf-8"))
    content["workload_rating"]["Levels"] = {str(value): "step" for value in range(0, 11)}
    dictionary.write_text(json.dumps(content), encoding="utf-8")
    report = validate_dataset(root)
    (error,) = [p for p in report.errors if p.code == "ratings.scale_mismatch"]
    assert error.path == SCANS.replace(".tsv", ".json") and error.field == "workload_rating"
    assert "0" in error.message and "10" in error.message


def test_custom_scale_and_its_bins(runs, tmp_path):
    """A study scale of 0-10 with two bins: ratings get their bin; 8 is still on the scale
    (common practice, no source)."""
    scale = {"min": 0, "max": 10, "levels": [{"name": "lower", "min": 0, "max": 5},
                                             {"name": "upper", "min": 6, "max": 10}]}
    root = tmp_path / "runs"
    shutil.copytree(runs, root)
    dictionary = root / SCANS.replace(".tsv", ".json")
    content = json.loads(dictionary.read_text(encoding="utf-8"))
    content["workload_rating"].update({"Minimum": 0, "Maximum": 10})
    dictionary.write_text(json.dumps(content), encoding="utf-8")
    report = validate_dataset(root, scale=scale)
    assert report.ok, report.errors
    levels = {info.rating: info.level for info in report.recordings if info.rating is not None}
    parsed = Scale.from_dict(scale)
    assert levels == {rating: parsed.level_of(rating) for rating in levels}
    assert set(levels.values()) == {"lower", "upper"}


def test_unrated_task_recording_is_kept_with_a_warning(runs, tmp_path):
    """A task run with n/a as rating stays in the index, unlabelled, with a warning naming
    the scans.tsv line and column."""
    root = tmp_path / "runs"
    shutil.copytree(runs, root)
    scans = root / SCANS
    lines = scans.read_text(encoding="utf-8").split("\n")
    lines[2] = lines[2].rsplit("\t", 1)[0] + "\tn/a"
    scans.write_text("\n".join(lines), encoding="utf-8")
    report = validate_dataset(root)
    assert report.ok
    (warning,) = [p for p in report.warnings if p.code == "ratings.missing"]
    assert (warning.path, warning.line, warning.field) == (SCANS, 3, "workload_rating")
    assert len(report.recordings) == 3


@pytest.mark.parametrize(("scale", "words"), [
    ({"min": 9, "max": 1}, "below"),
    ({"min": 1, "max": 9, "levels": [{"name": "a", "min": 1, "max": 5},
                                     {"name": "b", "min": 5, "max": 9}]}, "overlap"),
    ({"min": 1, "max": 9, "levels": [{"name": "a", "min": 0, "max": 5}]}, "inside"),
    ({"max": 9}, "whole-number"),
])
def test_bad_scale_settings_raise(scale, words):
    """A scale that cannot be used is the caller's mistake: ValueError."""
    with pytest.raises(ValueError, match=words):
        Scale.from_dict(scale)


@pytest.mark.parametrize("ratings", [{"source": "survey"}, {"sheet": "x"},
                                     {"source": "phenotype", "table": "ratings.tsv"}])
def test_bad_rating_settings_raise(ratings):
    """Unknown sources, unknown keys and tables outside phenotype/ are refused."""
    with pytest.raises(ValueError):
        RatingSettings.from_dict(ratings)


@pytest.mark.parametrize(("text", "rating", "fails"), [
    ("7", 7, False), ("7.0", 7, False), (" 3 ", 3, False), ("n/a", None, False),
    ("", None, False), ("7.5", None, True), ("ten", None, True), ("0", None, True),
    ("10", None, True), ("nan", None, True), ("inf", None, True),
])
def test_rating_cells(text, rating, fails):
    """Whole numbers on the scale are ratings; n/a and empty are no rating; anything else
    is a problem (common practice, no source)."""
    value, problem = Scale.from_dict(None).parse(text)
    assert value == rating and (problem is not None) == fails
