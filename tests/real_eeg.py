"""The real EEG recordings of MNE-Python's public test data, for tests.

They are copied unchanged from mne-tools/mne-testing-data (see the README beside them) and
expected at ``../shared/reference/real-eeg`` beside the checkout, or where
``CAIRN_REAL_EEG`` points. Missing, the tests that need them skip — or fail under
CAIRN_REQUIRE_SERVICES=1, as in ``make test``.
"""

import csv
import json
import os
from pathlib import Path

from tests.helpers import skip_or_fail

#: The one long recording: 32 channels read as EEG, 128 Hz, 238 s, made of joined segments.
EEGLAB_LONG = "EEGLAB/test_raw.set"
#: Its mains frequency, read from its spectrum (a test checks it): the peak stands at 60 Hz.
EEGLAB_LONG_MAINS_HZ = 60.0


def real_eeg_location():
    return Path(os.environ.get("CAIRN_REAL_EEG",
                               Path(__file__).resolve().parents[1].parent / "shared"
                               / "reference" / "real-eeg"))


def real_eeg(relative):
    """Path of one file of the collection; skips (or fails) when it is missing."""
    path = real_eeg_location() / relative
    if not path.is_file():
        skip_or_fail(f"the real EEG test file {relative} is not at {path} "
                     "(set CAIRN_REAL_EEG to the folder holding MNE-Python's test recordings)")
    return path


def read_long_recording():
    """MNE-Python testing data, EEGLAB/test_raw.set, read by mne with its data loaded and
    its mains frequency set."""
    import mne

    raw = mne.io.read_raw_eeglab(real_eeg(EEGLAB_LONG), preload=True, verbose="ERROR")
    raw.info["line_freq"] = EEGLAB_LONG_MAINS_HZ
    return raw


def write_long_recording_bids(root, *, rating=5, condition="moderate"):
    """The long recording as sub-01's one recording of a BIDS dataset at ``root``, written
    by mne-bids (the EEGLAB files are copied unchanged); scans.tsv gets an INVENTED
    condition and workload rating (the recording has none), described as invented in
    scans.json. Returns the data file's path relative to ``root``."""
    import mne
    import mne_bids

    raw = mne.io.read_raw_eeglab(real_eeg(EEGLAB_LONG), verbose="ERROR")
    raw.info["line_freq"] = EEGLAB_LONG_MAINS_HZ
    path = mne_bids.BIDSPath(root=root, subject="01", task="task", datatype="eeg",
                             suffix="eeg", extension=".set")
    mne_bids.write_raw_bids(raw, path, overwrite=True, verbose="ERROR")
    scans_tsv = root / "sub-01" / "sub-01_scans.tsv"
    with open(scans_tsv, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh, delimiter="\t"))
    with open(scans_tsv, "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=["filename", "acq_time", "difficulty",
                                                "workload_rating"], delimiter="\t",
                                lineterminator="\n")
        writer.writeheader()
        for row in rows:
            writer.writerow({"filename": row["filename"], "acq_time": row.get("acq_time", "n/a"),
                             "difficulty": condition, "workload_rating": rating})
    (root / "sub-01" / "sub-01_scans.json").write_text(json.dumps({
        "difficulty": {"Description": "Condition of the recording (INVENTED for a test: the "
                                      "public recording carries none)."},
        "workload_rating": {"Description": "Workload rating (INVENTED for a test: the public "
                                           "recording carries none).", "Minimum": 1,
                            "Maximum": 9},
    }, indent=2), encoding="utf-8")
    return path.fpath.relative_to(root).as_posix()
