"""File names against the BIDS schema: Cairn's own reading agrees with bids-validator."""

import pytest
from bids_validator import BIDSValidator

from cairn_science.bids import schema
from cairn_science.bids.names import BidsIgnore, check_path, walk_dataset

# (path relative to the dataset root, what is wrong with it or "" when it is a good name)
NAMES = [
    ("sub-01/eeg/sub-01_task-rest_eeg.edf", ""),
    ("sub-01/eeg/sub-01_task-rest_eeg.bdf", ""),
    ("sub-01/eeg/sub-01_task-rest_eeg.vhdr", ""),
    ("sub-01/eeg/sub-01_task-rest_eeg.vmrk", ""),
    ("sub-01/eeg/sub-01_task-rest_eeg.eeg", ""),
    ("sub-01/eeg/sub-01_task-rest_eeg.set", ""),
    ("sub-01/eeg/sub-01_task-rest_eeg.fdt", ""),
    ("sub-01/eeg/sub-01_task-rest_eeg.json", ""),
    ("sub-01/eeg/sub-01_task-rest_channels.tsv", ""),
    ("sub-01/eeg/sub-01_task-rest_events.tsv", ""),
    ("sub-01/eeg/sub-01_task-rest_events.json", ""),
    ("sub-01/eeg/sub-01_space-CapTrak_electrodes.tsv", ""),
    ("sub-01/eeg/sub-01_space-CapTrak_coordsystem.json", ""),
    ("sub-01/eeg/sub-01_acq-face_photo.jpg", ""),
    ("sub-01/eeg/sub-01_task-rest_recording-ecg_physio.tsv.gz", ""),
    ("sub-01/eeg/sub-01_channels.tsv", ""),
    ("sub-01/ses-01/eeg/sub-01_ses-01_task-rest_eeg.edf", ""),
    ("sub-01/ses-01/eeg/sub-01_ses-01_task-rest_run-1_eeg.edf", ""),
    ("sub-01/ses-01/eeg/sub-01_ses-01_task-rest_acq-dry_run-02_eeg.edf", ""),
    ("sub-01/ses-01/sub-01_ses-01_scans.tsv", ""),
    ("sub-01/sub-01_scans.tsv", ""),
    ("sub-01/sub-01_sessions.tsv", ""),
    ("task-rest_eeg.json", ""),
    ("task-rest_events.json", ""),
    ("sub-01/sub-01_task-rest_eeg.json", ""),
    ("sub-01/ses-01/sub-01_ses-01_task-rest_eeg.json", ""),
    ("dataset_description.json", ""),
    ("participants.tsv", ""),
    ("participants.json", ""),
    ("README", ""),
    ("README.md", ""),
    ("CHANGES", ""),
    ("LICENSE", ""),
    ("phenotype/workload.tsv", ""),
    ("phenotype/workload.json", ""),
    ("sourcedata/raw/anything.xyz", ""),
    ("derivatives/cleaned/sub-01_whatever.fif", ""),
    ("code/convert.py", ""),
    ("sub-01/eeg/sub-01_task-rest_zork-1_eeg.edf", "'zork-' is not an entity"),
    ("sub-01/eeg/sub-01_task-rest_eeg.fif", "extension '.fif'"),
    ("sub-01/eeg/sub-01_task-rest_eeg.EDF", "extension '.EDF'"),
    ("sub-01/eeg/sub-01_task-rest_eeg.edf.gz", "extension '.edf.gz'"),
    ("sub-01/eeg/sub-01_task-rest_eeg", "extension ''"),
    ("sub-01/eeg/sub-01_eeg.edf", "needs the 'task-<value>' entity"),
    ("sub-01/eeg/sub-01_task-re_st_eeg.edf", "'st' is not a key-value pair"),
    ("sub-01/eeg/sub-01_task-re.st_eeg.edf", "must end with a suffix"),
    ("sub-01/eeg/sub-01_task-rest!_eeg.edf", "letters and digits only"),
    ("sub-01/eeg/sub-01_task-rest_acq-_eeg.edf", "letters and digits only"),
    ("sub-01/eeg/sub-01_task-rest_run-a_eeg.edf", "whole number"),
    ("sub-01/eeg/sub-01_run-1_task-rest_eeg.edf", "out of order"),
    ("sub-01/eeg/task-rest_sub-01_eeg.edf", "out of order"),
    ("sub-01/eeg/sub-01_task-rest_run-1_acq-dry_eeg.edf", "out of order"),
    ("sub-01/ses-01/eeg/sub-01_task-rest_ses-01_eeg.edf", "out of order"),
    ("sub-01/eeg/sub-01_task-rest_EEG.edf", "'_EEG' is not a file type"),
    ("sub-01/eeg/sub-01_task-rest_notes.txt", "'_notes' is not a file type"),
    ("sub-01/eeg/sub-01_task-rest_meg.edf", "belong in a meg/ folder"),
    ("sub-01/eeg/sub-01_task-rest_bold.edf", "belong in a func/ folder"),
    ("sub-01/eeg/sub-01_task-rest_channels.csv", "extension '.csv'"),
    ("sub-01/eeg/sub-01_task-rest_space-CapTrak_eeg.edf", "'space-' is not used"),
    ("sub-01/eeg/sub-01_task-rest_rec-x_eeg.edf", "'rec-' is not used"),
    ("sub-01/eeg/sub-01_task-rest_split-1_eeg.edf", "'split-' is not used"),
    ("sub-01/eeg/sub-01_task-rest_desc-clean_eeg.edf", "'desc-' is not used"),
    ("sub-01/eeg/sub-01_task-rest_photo.jpg", "'task-' is not used"),
    ("sub-01/eeg/sub-02_task-rest_eeg.edf", "differs from the folder"),
    ("sub-01/ses-01/eeg/sub-01_ses-02_task-rest_eeg.edf", "differs from the folder"),
    ("sub-01/ses-01/eeg/sub-01_task-rest_eeg.edf", "must start their name"),
    ("sub-01/eeg/sub-01_ses-01_task-rest_eeg.edf", "not inside a ses-01/ folder"),
    ("sub-01/ses-01/sub-01_scans.tsv", "must start their name"),
    ("sub-01/sub-01_task-rest_eeg.edf", "belong in a eeg/ folder"),
    ("sub-01/EEG/sub-01_task-rest_eeg.edf", "not a BIDS data type folder"),
    ("sub-01/eeg/extra/sub-01_task-rest_eeg.edf", "may not sit in further folders"),
    ("sub-01_task-rest_eeg.json", "not inside a sub-01/ folder"),
    ("notes.txt", "top level"),
    ("participants.csv", "top level"),
    ("sub-0_1/eeg/sub-0_1_task-rest_eeg.edf", "letters and digits only"),
    ("extra/sub-01_task-rest_eeg.edf", "not part of a BIDS dataset"),
]


@pytest.mark.parametrize(("path", "problem"), NAMES, ids=[path for path, _ in NAMES])
def test_names_agree_with_bids_validator(path, problem):
    """Accepted and rejected names agree with ``bids_validator.BIDSValidator().is_bids``
    (bids-validator package 1.14.7, which builds its rules from the same bidsschematools
    schema, BIDS 1.11.2); rejections say what is wrong."""
    check = check_path(path)
    assert check.ok == BIDSValidator().is_bids("/" + path)
    assert check.ok == (problem == "")
    assert problem in check.message


def test_agreement_table_covers_good_and_bad_names():
    """The table holds at least 40 names, both accepted and rejected ones (common practice,
    no source)."""
    accepted = [path for path, problem in NAMES if not problem]
    rejected = [path for path, problem in NAMES if problem]
    assert len(NAMES) >= 40 and len(accepted) >= 20 and len(rejected) >= 20


def test_entities_suffix_and_kind_read_from_a_name():
    """Entities, suffix, extension and datatype come from the name; JSON and TSV files are
    sidecars that may sit above the data (BIDS schema, inheritance principle)."""
    data = check_path("sub-01/ses-02/eeg/sub-01_ses-02_task-nback_acq-dry_run-3_eeg.vhdr")
    assert data.kind == "data"
    assert data.entities == {"sub": "01", "ses": "02", "task": "nback", "acq": "dry",
                             "run": "3"}
    assert (data.suffix, data.extension, data.datatype) == ("eeg", ".vhdr", "eeg")
    assert check_path("task-nback_eeg.json").kind == "sidecar"
    assert check_path("sub-01/ses-02/sub-01_ses-02_scans.tsv").kind == "sidecar"


def test_eeg_rules_come_from_the_schema():
    """The EEG data-file rule allows exactly the schema's extensions and entities in the
    schema's order (BIDS schema in bidsschematools)."""
    loaded = schema.load()
    expected = loaded.rules.files.raw.eeg.eeg
    rule = next(rule for rule in schema.name_rules()
                if rule.origin == "raw.eeg.eeg" and not rule.inherited)
    assert rule.extensions == set(expected.extensions) - schema.HERITABLE_EXTENSIONS
    names = [name for name, _, _ in rule.entities]
    assert set(names) == set(expected.entities)
    assert names == [name for name in loaded.rules.entities if name in names]


def test_bidsignore_and_opaque_folders(tmp_path):
    """``.bidsignore`` globs (gitignore style) and the folders the standard leaves unnamed
    (code/, sourcedata/, derivatives/, stimuli/) are left out of the walk (BIDS schema
    rules.directories; .bidsignore as the standard describes it)."""
    for path in ("sub-01/eeg/sub-01_task-rest_eeg.edf", "sub-01/eeg/notes.txt",
                 "extra/anything.bin", "sourcedata/x.raw", "code/a.py", "derivatives/d/e.tsv",
                 "logs/run.log", ".git/config", "sub-01/scratch/tmp.bin"):
        (tmp_path / path).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / path).write_bytes(b"")
    (tmp_path / ".bidsignore").write_text("# local notes\n*.txt\nsub-*/scratch/\n",
                                          encoding="utf-8")
    listing = walk_dataset(tmp_path)
    assert listing.files == ["sub-01/eeg/sub-01_task-rest_eeg.edf"]
    assert listing.ignored == ["sub-01/eeg/notes.txt", "sub-01/scratch/"]
    assert listing.opaque_folders == ["code", "derivatives", "logs", "sourcedata"]
    assert listing.unknown_folders == ["extra"]


@pytest.mark.parametrize(("pattern", "path", "ignored"), [
    ("*.txt", "sub-01/eeg/a.txt", True),
    ("/notes.md", "notes.md", True),
    ("/notes.md", "sub-01/notes.md", False),
    ("sub-*/eeg/*_photo.jpg", "sub-01/eeg/sub-01_photo.jpg", True),
    ("**/tmp/", "sub-01/eeg/tmp/x", True),
    ("extra", "extra/deep/file", True),
    ("data?.bin", "data1.bin", True),
    ("data?.bin", "data12.bin", False),
])
def test_bidsignore_patterns(pattern, path, ignored):
    """Gitignore-style matching: unanchored globs match at any depth, a leading slash
    anchors, a trailing slash means a folder (common practice, no source)."""
    assert BidsIgnore([pattern]).ignores(path) == ignored


def test_negated_bidsignore_pattern_includes_again():
    """A later ``!pattern`` takes a file back in (gitignore convention, no source)."""
    ignore = BidsIgnore(["*.log", "!keep.log"])
    assert ignore.ignores("a.log") and not ignore.ignores("keep.log")
