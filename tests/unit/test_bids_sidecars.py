"""The inheritance principle: which sidecars apply to a recording, and which value wins.

Rules as the BIDS standard states them (common principles, inheritance): a metadata file
applies if it is in the data file's folder or above, has the same suffix and extension and
a subset of the data file's entities; JSON values of deeper files override higher ones;
a table comes from the closest folder; two applicable files in one folder are an error.
"""

import json

import pytest

from cairn_science.bids.report import Report
from cairn_science.bids.sidecars import Tree
from cairn_science.bids.validate import validate_dataset

REQUIRED = {"TaskName": "x", "SamplingFrequency": 250, "EEGReference": "Cz",
            "PowerLineFrequency": 50, "SoftwareFilters": "n/a"}
CHANNELS = "name\ttype\tunits\nFz\tEEG\tuV\nCz\tEEG\tuV\n"


def _write(root, files):
    for path, content in files.items():
        target = root / path
        target.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(content, dict):
            content = json.dumps(content)
        target.write_bytes(content.encode("utf-8") if isinstance(content, str) else content)


@pytest.fixture
def layered(tmp_path):
    """A structure-only tree with eeg.json at three levels and channels.tsv at two."""
    _write(tmp_path, {
        "dataset_description.json": {"Name": "layers", "BIDSVersion": "1.11.0"},
        "README": "Sidecars at several levels.\n",
        "participants.tsv": "participant_id\nsub-01\n",
        "task-x_eeg.json": {**REQUIRED, "Manufacturer": "root"},
        "task-y_eeg.json": {"PowerLineFrequency": 400},
        "task-x_acq-dry_eeg.json": {"Manufacturer": "dry cap"},
        "task-x_channels.tsv": CHANNELS,
        "sub-01/sub-01_task-x_eeg.json": {"PowerLineFrequency": 60},
        "sub-01/eeg/sub-01_task-x_run-1_eeg.json": {"Manufacturer": "run one"},
        "sub-01/eeg/sub-01_task-x_run-1_eeg.edf": b"",
        "sub-01/eeg/sub-01_task-x_run-2_eeg.edf": b"",
        "sub-01/eeg/sub-01_task-x_run-2_channels.tsv": CHANNELS.replace("Cz", "Pz"),
    })
    return tmp_path


def test_deeper_values_override_and_unrelated_files_do_not_apply(layered):
    """run-1 takes Manufacturer from its own file and PowerLineFrequency from the subject
    level; run-2 keeps the top-level Manufacturer. task-y and acq-dry files apply to
    neither (their entities are not the recordings')."""
    tree = Tree.from_root(layered)
    run1 = tree.checks["sub-01/eeg/sub-01_task-x_run-1_eeg.edf"]
    run2 = tree.checks["sub-01/eeg/sub-01_task-x_run-2_eeg.edf"]
    merged1, sources1, _ = tree.merged_json(run1, suffix="eeg", report=Report())
    merged2, sources2, _ = tree.merged_json(run2, suffix="eeg", report=Report())
    assert sources1 == ["task-x_eeg.json", "sub-01/sub-01_task-x_eeg.json",
                        "sub-01/eeg/sub-01_task-x_run-1_eeg.json"]
    assert sources2 == ["task-x_eeg.json", "sub-01/sub-01_task-x_eeg.json"]
    assert (merged1["Manufacturer"], merged1["PowerLineFrequency"]) == ("run one", 60)
    assert (merged2["Manufacturer"], merged2["PowerLineFrequency"]) == ("root", 60)


def test_tables_come_from_the_closest_folder(layered):
    """run-2 uses its own channels.tsv; run-1 falls back to the top-level one."""
    tree = Tree.from_root(layered)
    closest = {
        run: tree.closest_table(tree.checks[f"sub-01/eeg/sub-01_task-x_run-{run}_eeg.edf"],
                                suffix="channels", report=Report())
        for run in (1, 2)
    }
    assert closest == {1: "task-x_channels.tsv",
                       2: "sub-01/eeg/sub-01_task-x_run-2_channels.tsv"}


def test_layered_tree_validates_with_inherited_values(layered):
    """Structure-only validation indexes both recordings with the merged values."""
    report = validate_dataset(layered, read_data=False)
    assert report.ok, report.errors
    by_run = {info.run: info for info in report.recordings}
    assert by_run["1"].power_line_hz == by_run["2"].power_line_hz == 60
    assert by_run["2"].channel_names == ["Fz", "Pz"] and by_run["1"].channel_names == ["Fz", "Cz"]


def test_two_applicable_sidecars_in_one_folder_are_an_error(layered):
    """A second top-level sidecar that also fits run-1 leaves the winner unclear."""
    _write(layered, {"task-x_run-1_eeg.json": {"Manufacturer": "also run one"}})
    report = validate_dataset(layered, read_data=False)
    clashes = {p.path for p in report.errors if p.code == "inheritance.clash"}
    assert clashes == {"task-x_eeg.json", "task-x_run-1_eeg.json"}


def test_required_field_given_only_higher_up_is_enough(layered):
    """A required field may come from any level; missing everywhere, it is an error on the
    closest sidecar."""
    assert validate_dataset(layered, read_data=False).ok
    _write(layered, {"task-x_eeg.json": {key: value for key, value in REQUIRED.items()
                                         if key != "EEGReference"}})
    report = validate_dataset(layered, read_data=False)
    missing = {(p.path, p.field) for p in report.errors if p.code == "sidecar.required"}
    assert missing == {("sub-01/eeg/sub-01_task-x_run-1_eeg.json", "EEGReference"),
                       ("sub-01/sub-01_task-x_eeg.json", "EEGReference")}


def test_recording_without_any_sidecar(tmp_path):
    """No applicable eeg.json anywhere is an error naming the sidecar to add."""
    _write(tmp_path, {
        "dataset_description.json": {"Name": "bare", "BIDSVersion": "1.11.0"},
        "participants.tsv": "participant_id\nsub-01\n",
        "sub-01/eeg/sub-01_task-x_eeg.edf": b"",
    })
    report = validate_dataset(tmp_path, read_data=False)
    assert any(p.path == "sub-01/eeg/sub-01_task-x_eeg.json" and p.code == "sidecar.missing"
               for p in report.errors)


def test_one_recording_in_two_formats_is_an_error(layered):
    """Two data files with the same name but different formats make one recording twice
    (BIDS: one data file per recording, apart from a format's companion files)."""
    _write(layered, {"sub-01/eeg/sub-01_task-x_run-2_eeg.bdf": b""})
    report = validate_dataset(layered, read_data=False)
    assert [p.path for p in report.errors if p.code == "layout.two_formats"] == [
        "sub-01/eeg/sub-01_task-x_run-2_eeg.edf"]
