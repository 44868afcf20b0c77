"""De-identification findings (EDF/BDF headers, BrainVision comments, participants.tsv) and
scrubbing them in place."""

import shutil

import pytest

from cairn_science.bids.deid import edf_findings, identifier_columns, scrub_dataset
from cairn_science.bids.headers import read_edf_header
from cairn_science.bids.readers import read_tsv
from cairn_science.bids.validate import validate_dataset
from fixtures.broken_bids import STEM_RUN1, build_clean_dataset
from tests.helpers import bids_examples


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    return build_clean_dataset(tmp_path_factory.mktemp("deid") / "clean")


@pytest.fixture
def dataset(clean, tmp_path):
    root = tmp_path / "bids"
    shutil.copytree(clean, root)
    return root


def _set_header(path, offset, text):
    with open(path, "r+b") as handle:
        handle.seek(offset)
        handle.write(text.encode("ascii").ljust(80, b" "))


@pytest.mark.parametrize(("patient", "fields"), [
    ("X X X X", set()),
    ("sub-01 X X X", set()),
    ("X M X X", set()),
    ("HX4471 X X X", {"patient code"}),
    ("X F 14-FEB-1962 X", {"patient birthdate"}),
    ("X X X Ada_Example", {"patient name"}),
    ("X X X X height=1.7", {"patient additional"}),
])
def test_edf_plus_patient_subfields(dataset, patient, fields):
    """EDF+ patient field: code, sex, birth date, name, then optional text; 'X' means
    unknown and sex alone is not a direct identifier (EDF+ specification)."""
    path = dataset / f"{STEM_RUN1}_eeg.edf"
    _set_header(path, 8, patient)
    findings = edf_findings("f.edf", read_edf_header(path), participant="01")
    assert {f.field for f in findings if f.kind == "identifier"} == fields


def test_edf_recording_field_and_start_date(dataset):
    """A technician in the EDF+ recording field is an identifier; the start date is a
    measurement date, and 01.01.85 with 'Startdate X' is the anonymous form (EDF+
    specification)."""
    path = dataset / f"{STEM_RUN1}_eeg.edf"
    _set_header(path, 88, "Startdate 03-JUN-2024 X J.Doe lab-amp")
    findings = edf_findings("f.edf", read_edf_header(path))
    assert {(f.kind, f.field) for f in findings} == {("identifier", "recording technician"),
                                                     ("measurement_date", "startdate")}
    _set_header(path, 88, "Startdate X X X X")
    with open(path, "r+b") as handle:
        handle.seek(168)
        handle.write(b"01.01.8500.00.00")
    assert edf_findings("f.edf", read_edf_header(path)) == []


def test_headers_outside_the_checked_tree_are_found_and_scrubbed(dataset):
    """An EDF in sourcedata/ is not checked as BIDS but is stored with the upload, so its
    header is searched and scrubbed too (common practice, no source)."""
    source = dataset / "sourcedata" / "original.edf"
    source.parent.mkdir()
    source.write_bytes((dataset / f"{STEM_RUN1}_eeg.edf").read_bytes())
    _set_header(source, 8, "X X X Ada_Example")
    report = validate_dataset(dataset)
    assert [(p.path, p.field) for p in report.errors] == [("sourcedata/original.edf",
                                                           "patient name")]
    assert [change["path"] for change in scrub_dataset(dataset)] == ["sourcedata/original.edf"]
    assert validate_dataset(dataset).ok


def test_scrub_mode_turns_identifier_errors_into_warnings(dataset):
    """In "scrub" mode an identifier is a warning and the upload passes; measurement dates
    are warnings in both modes."""
    _set_header(dataset / f"{STEM_RUN1}_eeg.edf", 8, "X F 14-FEB-1962 Ada_Example")
    refused = validate_dataset(dataset, deid="refuse")
    scrubbing = validate_dataset(dataset, deid="scrub")
    assert {p.code for p in refused.errors} == {"deid.identifier"}
    assert scrubbing.ok
    assert {p.field for p in scrubbing.warnings if p.code == "deid.identifier"} == {
        "patient birthdate", "patient name"}
    for report in (refused, scrubbing):
        assert all(p.code != "deid.measurement_date" for p in report.errors)
        assert any(p.code == "deid.measurement_date" for p in report.warnings)
    with pytest.raises(ValueError):
        validate_dataset(dataset, deid="ignore")


def test_participants_identifier_columns_by_name_and_value(dataset):
    """Columns named like identifiers, or whose values look like e-mail addresses, phone
    numbers, full dates or personal names, are findings; scrubbing drops them from
    participants.tsv and participants.json and keeps the rest (common practice, no source)."""
    (dataset / "participants.tsv").write_text(
        "participant_id\tage\tsex\tsurname\tcontact\tborn\tcarer\tgroup\n"
        "sub-01\t34\tF\tVos\tada@example.org\t1962-02-14\tJan Pieters\tcontrol\n",
        encoding="utf-8")
    flagged = identifier_columns(read_tsv(dataset / "participants.tsv"))
    assert set(flagged) == {"surname", "contact", "born", "carer"}
    report = validate_dataset(dataset)
    assert {p.field for p in report.errors if p.code == "deid.identifier"} == set(flagged)
    changes = scrub_dataset(dataset)
    assert {"path": "participants.tsv", "field": "columns", "before": list(flagged),
            "after": []} in changes
    table = read_tsv(dataset / "participants.tsv")
    assert table.columns == ["participant_id", "age", "sex", "group"]
    assert table.rows[0][1] == {"participant_id": "sub-01", "age": "34", "sex": "F",
                                "group": "control"}
    assert validate_dataset(dataset).ok


@pytest.mark.parametrize("name", ["eeg_cbm", "eeg_matchingpennies", "eeg_rishikesh"])
def test_example_participants_hold_no_identifiers(name):
    """The bids-examples' participants.tsv files (age, sex, handedness, group) give no
    findings (bids-examples: eeg_cbm CC-BY 4.0, eeg_matchingpennies PDDL 1.0, eeg_rishikesh
    CC0)."""
    path = bids_examples() / name / "participants.tsv"
    assert identifier_columns(read_tsv(path)) == {}


def test_brainvision_comment_lines(tmp_path):
    """Comment lines of a .vhdr naming a patient or giving an e-mail address are findings;
    scrubbing removes those lines only and mne still reads the header (BrainVision Core Data
    Format; mne's BrainVision reader)."""
    import mne
    import mne_bids
    import numpy as np

    info = mne.create_info(["Fz", "Cz", "Pz"], 250.0, "eeg")
    raw = mne.io.RawArray(np.random.default_rng(5).normal(scale=1e-5, size=(3, 2500)), info,
                          verbose=False)
    raw.info["line_freq"] = 50.0
    bids_path = mne_bids.BIDSPath(root=tmp_path, subject="01", task="rest", datatype="eeg",
                                  suffix="eeg", extension=".vhdr")
    mne_bids.write_raw_bids(raw, bids_path, format="BrainVision", allow_preload=True,
                            overwrite=True, verbose=False)
    vhdr = bids_path.fpath
    original = vhdr.read_text(encoding="utf-8")
    vhdr.write_text(original + "Patient: Ada Example\nAmplifier gain 1\n"
                    "Subject: sub-01\nContact ada@example.org\n", encoding="utf-8")
    report = validate_dataset(tmp_path)
    lines = sorted(p.line for p in report.errors if p.code == "deid.identifier")
    text_lines = vhdr.read_text(encoding="utf-8").split("\n")
    assert [text_lines[line - 1] for line in lines] == ["Patient: Ada Example",
                                                        "Contact ada@example.org"]
    scrub_dataset(tmp_path)
    assert vhdr.read_text(encoding="utf-8") == original + "Amplifier gain 1\nSubject: sub-01\n"
    assert validate_dataset(tmp_path).ok
    mne.io.read_raw_brainvision(vhdr, verbose="ERROR")
