"""The BIDS standard's own EEG examples pass, with sidecars inherited as the standard says.

Source: bids-standard/bids-examples (snapshot at commit ca54a02e, copied to
../shared/reference/bids-examples without code/, stimuli/, sourcedata/): eeg_cbm (CC-BY 4.0),
eeg_matchingpennies (PDDL 1.0), eeg_rishikesh (CC0). Their data files are zero-byte
placeholders, so these tests validate with ``read_data=False``.
"""

import json

import pytest
from bids_validator import BIDSValidator

from cairn_science.bids.index import pybids_agreement
from cairn_science.bids.names import check_path, is_eeg_data, walk_dataset
from cairn_science.bids.report import Report
from cairn_science.bids.sidecars import Tree
from cairn_science.bids.validate import validate_dataset
from tests.helpers import bids_examples, examples_location

EXAMPLES = examples_location()
NAMES = ("eeg_cbm", "eeg_matchingpennies", "eeg_rishikesh")

# Warnings these examples legitimately raise (each reviewed against the files):
# - ratings.missing / ratings.no_column / ratings.no_condition: the examples hold no
#   workload ratings or conditions;
# - sidecar.recommended: their sidecars leave out recommended fields (e.g. DeviceSerialNumber);
# - deid.measurement_date: eeg_cbm's scans.tsv gives acq_time;
# - channels.name_spaces: eeg_cbm's channels.tsv writes names like "F3 " with a space;
# - json.duplicate_key: sub-cbm009's eeg.json gives SoftwareFilters twice, with one value;
# - sidecar.channel_count: six eeg_cbm sidecars give EEGChannelCount 62 for 58 EEG rows.
LEGITIMATE_WARNINGS = {
    "eeg_cbm": {"ratings.no_column", "ratings.no_condition", "sidecar.recommended",
                "deid.measurement_date", "channels.name_spaces", "json.duplicate_key",
                "sidecar.channel_count"},
    "eeg_matchingpennies": {"ratings.missing", "sidecar.recommended"},
    "eeg_rishikesh": {"ratings.missing", "sidecar.recommended"},
}

@pytest.fixture(autouse=True)
def _examples_present():
    bids_examples()


@pytest.fixture(scope="module")
def reports():
    return {name: validate_dataset(EXAMPLES / name, read_data=False) for name in NAMES}


@pytest.mark.parametrize("name", NAMES)
def test_example_passes_without_errors(reports, name):
    """The example has no errors and only the warnings reviewed above (bids-examples)."""
    report = reports[name]
    assert report.errors == []
    assert {problem.code for problem in report.warnings} <= LEGITIMATE_WARNINGS[name]
    data_files = [check.path for check in map(check_path, walk_dataset(EXAMPLES / name).files)
                  if is_eeg_data(check)]
    assert sorted(info.path for info in report.recordings) == sorted(data_files)


@pytest.mark.parametrize("name", NAMES)
def test_every_example_name_agrees_with_bids_validator(name):
    """Every file of the example is accepted by Cairn and by bids-validator's ``is_bids``
    (bids-validator 1.14.7; bids-examples)."""
    paths = walk_dataset(EXAMPLES / name).files
    assert paths
    for path in paths:
        assert check_path(path).ok
        assert BIDSValidator().is_bids("/" + path)


def test_matchingpennies_top_level_sidecar_applies_to_every_recording(reports):
    """eeg_matchingpennies keeps one task-matchingpennies_eeg.json at the top level; by the
    inheritance principle it is the sidecar of every recording (bids-examples, PDDL 1.0)."""
    root = EXAMPLES / "eeg_matchingpennies"
    top = json.loads((root / "task-matchingpennies_eeg.json").read_text(encoding="utf-8"))
    tree = Tree.from_root(root)
    recordings = reports["eeg_matchingpennies"].recordings
    assert len(recordings) == 7
    for info in recordings:
        merged, sources, _ = tree.merged_json(tree.checks[info.path], suffix="eeg",
                                              report=Report())
        assert sources == ["task-matchingpennies_eeg.json"]
        assert merged == top
        assert info.power_line_hz == top["PowerLineFrequency"]
        assert info.sfreq_hz == top["SamplingFrequency"]
        _, events_sources, _ = tree.merged_json(tree.checks[info.path], suffix="events",
                                                report=Report())
        assert events_sources == ["task-matchingpennies_events.json"]


def test_cbm_sidecars_are_per_recording(reports):
    """eeg_cbm gives each recording its own eeg.json next to it (no top-level sidecar), and
    its scans.tsv one level up; the values come from the recording's own file (bids-examples,
    CC-BY 4.0)."""
    root = EXAMPLES / "eeg_cbm"
    tree = Tree.from_root(root)
    for info in reports["eeg_cbm"].recordings:
        own = info.path.replace("_eeg.edf", "_eeg.json")
        _, sources, _ = tree.merged_json(tree.checks[info.path], suffix="eeg",
                                         report=Report())
        assert sources == [own]
        content = json.loads((root / own).read_text(encoding="utf-8"))
        assert info.duration_s == content["RecordingDuration"]
        assert info.power_line_hz == content["PowerLineFrequency"]
        assert tree.closest_table(tree.checks[info.path], suffix="channels",
                                  report=Report()) == info.path.replace(
                                      "_eeg.edf", "_channels.tsv")


def test_rishikesh_sessions_and_inherited_events_dictionary(reports):
    """eeg_rishikesh has two sessions for some participants, per-recording eeg.json and one
    top-level task-meditation_events.json describing every events.tsv (bids-examples, CC0)."""
    root = EXAMPLES / "eeg_rishikesh"
    tree = Tree.from_root(root)
    recordings = reports["eeg_rishikesh"].recordings
    folders = {path.name[4:] for path in root.glob("sub-*/ses-*")}
    assert len(folders) > 1
    assert {info.session for info in recordings} == folders
    for info in recordings:
        _, sources, _ = tree.merged_json(tree.checks[info.path], suffix="events",
                                         report=Report())
        assert sources == ["task-meditation_events.json"]
        assert f"ses-{info.session}" in info.path


@pytest.mark.parametrize("name", NAMES)
def test_pybids_sees_what_cairn_sees(name):
    """pybids' ``BIDSLayout(validate=False)`` finds the same participants, sessions, tasks,
    runs and EEG data files with the same entities (pybids 0.22; bids-examples)."""
    assert pybids_agreement(EXAMPLES / name) == []


NA_COLUMNS = ("type", "units", "sampling_frequency", "low_cutoff", "high_cutoff", "notch")


def _copy_writable(source, target):
    """A copy of a (read-only) example that the test may edit."""
    import os
    import shutil

    shutil.copytree(source, target, copy_function=shutil.copyfile)
    for folder, _, _ in os.walk(target):
        os.chmod(folder, 0o755)
    return target


def test_cbm_with_every_channel_cell_unknown_is_accepted(tmp_path):
    """BIDS allows n/a in any table cell (BIDS specification, common principles, tabular
    files; from memory). eeg_cbm (bids-examples, CC-BY 4.0) with the type, units,
    sampling_frequency, low_cutoff, high_cutoff and notch of every channel written n/a is
    accepted: no error (1,160 channels.bad_type errors before issue 14 was fixed), and one
    warning per channels.tsv saying that its 58 channels, all 10-10 electrode names, are
    treated as EEG."""
    root = _copy_writable(EXAMPLES / "eeg_cbm", tmp_path / "eeg_cbm")
    tables = sorted(root.rglob("*_channels.tsv"))
    assert len(tables) == 20
    for path in tables:
        lines = path.read_text(encoding="utf-8").split("\n")
        header = lines[0].split("\t")
        assert set(NA_COLUMNS) <= set(header)
        path.write_text("\n".join([lines[0]] + [
            "\t".join("n/a" if column in NA_COLUMNS else value
                      for column, value in zip(header, line.split("\t"), strict=True))
            if line else line for line in lines[1:]]), encoding="utf-8")
    report = validate_dataset(root, read_data=False)
    assert report.errors == []
    unknown = [w for w in report.warnings if w.code == "channels.unknown_type"]
    assert sorted(w.path for w in unknown) == sorted(
        p.relative_to(root).as_posix() for p in tables)
    for warning in unknown:
        assert (warning.line, warning.field) == (2, "type")
        assert warning.message.startswith("58 channel(s) have type n/a")
        assert "are treated as EEG" in warning.message and "MISC" not in warning.message
    assert {w.code for w in report.warnings} <= LEGITIMATE_WARNINGS["eeg_cbm"] | {
        "channels.unknown_type"}
