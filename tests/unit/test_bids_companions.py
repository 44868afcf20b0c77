"""Files a header names stay inside the recording's folder (issue 13, file reads).

Real recordings from MNE-Python's public test data, wrapped as BIDS with mne-bids'
``write_raw_bids`` (MNE-Python testing data, Brainvision/test_NO.vhdr/.vmrk/.eeg and
EEGLAB/test_raw.set/.fdt, copied to ../shared/reference/real-eeg): their headers are edited
to name files outside the recording's folder, the way an attacker would, and validation,
the recording reader, the quality reader and the release's reader must all refuse them before
mne opens anything, naming the header line, without telling anything about the outside file.
Only the mains frequency (50 Hz) and task names are invented.
"""

import os
import re
import shutil
from pathlib import Path
from types import SimpleNamespace

import pytest

from cairn_science.bids.companions import CompanionError, companion_files
from cairn_science.bids.recording import read_recording
from cairn_science.bids.validate import validate_dataset
from tests.helpers import bids_examples, examples_location, skip_or_fail

REAL = Path(os.environ.get("CAIRN_REAL_EEG", Path(__file__).resolve().parents[3] / "shared"
                           / "reference" / "real-eeg"))
VHDR = "sub-01/eeg/sub-01_task-bv_eeg.vhdr"
VMRK = "sub-01/eeg/sub-01_task-bv_eeg.vmrk"
SET = "sub-01/eeg/sub-01_task-eeglab_eeg.set"
SECRET_MARK = b"CAIRN-SERVER-SECRET;"
# 1,000 frames of the BrainVision recording's 65 float32 channels: a file of this size
# would read as a valid recording if the header's name were followed.
SECRET_BYTES = 65 * 4 * 1000


def _real():
    if not (REAL / "Brainvision" / "test_NO.vhdr").is_file():
        skip_or_fail(f"MNE-Python's test recordings are not at {REAL}")
    return REAL


@pytest.fixture(scope="module")
def real_bids(tmp_path_factory):
    """The BrainVision and the EEGLAB test recordings as one BIDS dataset (mne-bids)."""
    import mne
    import mne_bids

    real = _real()
    root = tmp_path_factory.mktemp("real-bids") / "dataset"
    for task, source in (("bv", real / "Brainvision" / "test_NO.vhdr"),
                         ("eeglab", real / "EEGLAB" / "test_raw.set")):
        raw = mne.io.read_raw(source, verbose="error")
        raw.info["line_freq"] = 50.0  # invented: the test files do not say
        mne_bids.write_raw_bids(raw, mne_bids.BIDSPath(root=root, subject="01", task=task,
                                                       datatype="eeg"),
                                overwrite=True, verbose="error")
    return root


def _case(real_bids, tmp_path):
    """A copy of the dataset and a server file beside it, outside the dataset."""
    root = tmp_path / "dataset"
    shutil.copytree(real_bids, root)
    secret = tmp_path / "secret.eeg"
    secret.write_bytes((SECRET_MARK * (SECRET_BYTES // len(SECRET_MARK) + 1))[:SECRET_BYTES])
    return root, secret


def _set_line(path, key, value):
    """Set ``key=`` in a BrainVision file; return the 1-based line it is on."""
    lines = path.read_text(encoding="utf-8").split("\n")
    number = next(i for i, line in enumerate(lines) if line.startswith(f"{key}="))
    lines[number] = f"{key}={value}"
    path.write_text("\n".join(lines), encoding="utf-8")
    return number + 1


def _set_eeglab_data(path, value):
    """Name another data file in an EEGLAB .set (fields data and datfile of EEG)."""
    import scipy.io

    content = scipy.io.loadmat(path, squeeze_me=False)
    eeg = content["EEG"]
    for field in ("data", "datfile"):
        if field in eeg.dtype.names:
            eeg[field][0, 0] = value
    scipy.io.savemat(path, {"EEG": eeg}, appendmat=False, format="5",
                     long_field_names=True)


def _climb(root, secret):
    return VHDR, "DataFile", _set_line(root / VHDR, "DataFile", "../../../secret.eeg"), \
        "climbs out"


def _passwd(root, secret):
    return VHDR, "DataFile", _set_line(root / VHDR, "DataFile", "../../../../etc/passwd"), \
        "climbs out"


def _absolute(root, secret):
    return VHDR, "DataFile", _set_line(root / VHDR, "DataFile", str(secret)), "absolute path"


def _symlink(root, secret):
    data = root / VHDR.replace(".vhdr", ".eeg")
    data.unlink()
    data.symlink_to(secret)
    line = next(i for i, text in enumerate((root / VHDR).read_text(encoding="utf-8")
                                            .split("\n"), start=1)
                if text.startswith("DataFile="))
    return VHDR, "DataFile", line, "link leading outside"


def _marker(root, secret):
    return VHDR, "MarkerFile", _set_line(root / VHDR, "MarkerFile", "../../../secret.eeg"), \
        "climbs out"


def _marker_names_data(root, secret):
    return VMRK, "DataFile", _set_line(root / VMRK, "DataFile", str(secret)), "absolute path"


def _eeglab(root, secret):
    _set_eeglab_data(root / SET, "../x.fdt")
    shutil.copyfile(root / SET.replace(".set", ".fdt"), root / "sub-01" / "x.fdt")
    return SET, "data", None, "climbs out"


ATTACKS = {
    "brainvision_datafile_climbs_to_server_file": _climb,
    "brainvision_datafile_etc_passwd": _passwd,
    "brainvision_datafile_absolute": _absolute,
    "brainvision_datafile_symlink_out": _symlink,
    "brainvision_markerfile_climbs_out": _marker,
    "brainvision_marker_names_absolute_datafile": _marker_names_data,
    "eeglab_set_names_parent_fdt": _eeglab,
}


def _words(line, key):
    return f"line {line}, {key}" if line else f"field {key}"


def test_real_recordings_pass_and_read(real_bids):
    """The real BrainVision (63 EEG channels, 5 kHz) and EEGLAB (32 channels, 128 Hz, about
    238 s) recordings are accepted and read with their companions (MNE-Python testing data;
    channel counts as mne reads them)."""
    report = validate_dataset(real_bids)
    assert report.ok, report.errors
    assert {info.path: (info.n_channels, info.sfreq_hz) for info in report.recordings} == {
        VHDR: (65, 5000.0), SET: (32, 128.0)}
    bv = read_recording(real_bids, VHDR)
    eeglab = read_recording(real_bids, SET, preload=False)
    assert bv.get_data().shape == (65, 2238)
    assert eeglab.n_times / eeglab.info["sfreq"] == pytest.approx(238.3125)


def test_companions_of_real_headers_are_listed_in_their_folder():
    """MNE's own test files, as shipped: the .vmrk of test_NO still names
    'shortrecording2.eeg', a file that does not exist; a name inside the folder is listed
    whether or not the file exists (MNE-Python testing data, Brainvision/test_NO.vmrk)."""
    real = _real()
    assert [(c.header, c.line, c.key, c.path) for c in companion_files(
        real / "Brainvision", "test_NO.vhdr")] == [
        ("test_NO.vhdr", 6, "DataFile", "test_NO.eeg"),
        ("test_NO.vhdr", 7, "MarkerFile", "test_NO.vmrk"),
        ("test_NO.vmrk", 6, "DataFile", "shortrecording2.eeg")]
    assert {(c.key, c.path) for c in companion_files(real / "EEGLAB", "test_raw.set")} == {
        ("data", "test_raw.fdt"), ("datfile", "test_raw.fdt")}


def test_bids_example_headers_name_their_own_folder():
    """Every BrainVision header of eeg_matchingpennies (bids-examples, PDDL 1.0), written by
    another tool, names its data and marker files in its own folder: no false refusal."""
    bids_examples()
    root = examples_location() / "eeg_matchingpennies"
    headers = sorted(path.relative_to(root).as_posix() for path in root.rglob("*.vhdr"))
    assert len(headers) == 7
    for header in headers:
        keys = [(c.key, Path(c.path).parent.as_posix()) for c in companion_files(root, header)
                if c.header == header]
        assert keys == [("DataFile", Path(header).parent.as_posix()),
                        ("MarkerFile", Path(header).parent.as_posix())]


def _assert_nothing_leaks(messages):
    for message in messages:
        assert "CAIRN-SERVER-SECRET" not in message
        assert str(SECRET_BYTES) not in message and f"{SECRET_BYTES:,}" not in message
        assert "root:" not in message


@pytest.mark.parametrize("attack", ATTACKS, ids=list(ATTACKS))
def test_validation_refuses_a_header_naming_a_file_outside(attack, real_bids, tmp_path):
    """The upload is refused with the header's path, line and key; no message says
    anything about the outside file (issue 13)."""
    root, secret = _case(real_bids, tmp_path)
    header, key, line, reason = ATTACKS[attack](root, secret)
    report = validate_dataset(root)
    assert not report.ok
    named = [error for error in report.errors if error.path == header and error.field == key
             and error.line == line and error.code == "header.companion_outside"]
    assert named, [(e.path, e.line, e.field, e.message) for e in report.errors]
    assert _words(line, key) in named[0].message and reason in named[0].message
    assert "bare name" in named[0].message or "copy of the file" in named[0].message
    _assert_nothing_leaks([p.message for p in report.errors + report.warnings])


@pytest.mark.parametrize("attack", ATTACKS, ids=list(ATTACKS))
def test_recording_reader_refuses_before_mne_opens(attack, real_bids, tmp_path, monkeypatch):
    """read_recording raises CompanionError naming the header line; mne-bids is never
    called (issue 13)."""
    import mne_bids

    root, secret = _case(real_bids, tmp_path)
    header, key, line, reason = ATTACKS[attack](root, secret)
    data = SET if header == SET else VHDR

    def opened(*args, **kwargs):
        raise AssertionError("mne-bids opened the recording")

    monkeypatch.setattr(mne_bids, "read_raw_bids", opened)
    with pytest.raises(CompanionError) as caught:
        read_recording(root, data)
    assert f"{header}: {_words(line, key)}" in str(caught.value)
    _assert_nothing_leaks([str(caught.value)])


def test_quality_and_release_readers_refuse_too(real_bids, tmp_path, request):
    """The quality checks' reader stops the job with the header's words (a JobError, not an
    internal error), and predicting from the recording with a release refuses it (issue 13).
    The quality job is the portal's: that half runs only with pytest-django (not under
    ``make unit``, which runs tests/unit with ``-p no:django``, nor where Django is absent)."""
    from cairn_science.release import features_for_recording

    root, secret = _case(real_bids, tmp_path)
    _, key, line, _ = _passwd(root, secret)
    with pytest.raises(CompanionError, match=re.escape(f"line {line}, DataFile")):
        features_for_recording(root / VHDR, {"preprocessing": {}, "features": {}})
    if not request.config.pluginmanager.hasplugin("django"):
        pytest.skip("the quality job's reader is the portal's: it needs Django")
    from portal.jobs.services import JobError
    from portal.quality.jobs import read_raw

    with pytest.raises(JobError, match=re.escape(f"{VHDR}: line {line}, DataFile")):
        read_raw(root, SimpleNamespace(path=VHDR))


def test_configparser_spellings_are_checked(tmp_path):
    """mne reads .vhdr files with Python's configparser, which also takes 'key: value' and
    values continued on indented lines (Python documentation, configparser); those are
    refused too (common practice, no source)."""
    folder = tmp_path / "sub-01" / "eeg"
    folder.mkdir(parents=True)
    header = folder / "sub-01_task-x_eeg.vhdr"
    header.write_text("Brain Vision Data Exchange Header File Version 1.0\n"
                      "[Common Infos]\nMarkerFile : ../x.vmrk\nDataFile=x\n"
                      "  /../../../../etc/passwd\n", encoding="utf-8")
    with pytest.raises(CompanionError) as caught:
        companion_files(tmp_path, "sub-01/eeg/sub-01_task-x_eeg.vhdr")
    assert [(p.line, p.field) for p in caught.value.problems] == [(3, "MarkerFile"),
                                                                  (4, "DataFile")]


def test_a_data_file_linked_out_of_the_dataset_is_refused(tmp_path):
    """A recording that is itself a link leading outside the dataset is refused, and a
    validation lists the link instead of reading it (issue 13)."""
    outside = tmp_path / "outside.edf"
    outside.write_bytes(b"0" * 512)
    folder = tmp_path / "dataset" / "sub-01" / "eeg"
    folder.mkdir(parents=True)
    os.symlink(outside, folder / "sub-01_task-x_eeg.edf")
    with pytest.raises(CompanionError, match="link"):
        companion_files(tmp_path / "dataset", "sub-01/eeg/sub-01_task-x_eeg.edf")
    report = validate_dataset(tmp_path / "dataset")
    assert [e.path for e in report.errors if e.code == "layout.link"] == [
        "sub-01/eeg/sub-01_task-x_eeg.edf"]
    assert not report.recordings
