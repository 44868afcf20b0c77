"""Cairn's own header reading (sampling rate, duration, channel names) against mne-bids.

Validation takes these facts from :func:`cairn_science.bids.headers.read_header_facts`
(EDF, BDF, BrainVision) instead of opening every recording with ``mne_bids.read_raw_bids``;
mne-bids 0.20 (with mne 1.13) stays the reference here: the two must give equal values
on real recordings, on the BIDS standard's examples and on the demo consortium, and a
validation that leaves every file to mne-bids must give the same report.

Sources: MNE-Python testing data (mne-tools/mne-testing-data 0.159, see
../shared/reference/real-eeg/README.md): EDF/test_reduced.edf, BDF/test_bdf_stim_channel.bdf,
Brainvision/test_NO.vhdr, EEGLAB/test_raw.set; the BIDS examples eeg_cbm (CC-BY 4.0),
eeg_matchingpennies (PDDL 1.0) and eeg_rishikesh (CC0) from bids-standard/bids-examples
(../shared/reference/bids-examples/README.md), whose data files are zero-byte
placeholders; pyedflib's shipped test_generator.edf.
"""

from pathlib import Path

import pytest

from cairn_science.bids import validate as validate_module
from cairn_science.bids.headers import HeaderError, read_header_facts, read_with_mne_bids
from cairn_science.bids.validate import eeg_data_files, validate_dataset
from tests.real_eeg import real_eeg, write_long_recording_bids

EXAMPLES = Path(__file__).resolve().parents[2].parent / "shared" / "reference" / "bids-examples"
DEMO_SCALE = {"min": 1, "max": 9, "levels": [{"name": "low", "min": 1, "max": 3},
                                             {"name": "moderate", "min": 4, "max": 6},
                                             {"name": "high", "min": 7, "max": 9}]}


def _as_bids(source, root, extension):
    """A real recording copied unchanged into a BIDS tree by mne-bids; its relative path."""
    import mne
    import mne_bids

    reader = {".edf": mne.io.read_raw_edf, ".bdf": mne.io.read_raw_bdf,
              ".vhdr": mne.io.read_raw_brainvision}[extension]
    raw = reader(source, verbose="ERROR")
    path = mne_bids.BIDSPath(root=root, subject="01", task="x", datatype="eeg", suffix="eeg",
                             extension=extension)
    mne_bids.write_raw_bids(raw, path, overwrite=True, verbose="ERROR")
    return path.fpath.relative_to(root).as_posix()


@pytest.mark.parametrize("relative, extension", [
    ("EDF/test_reduced.edf", ".edf"),  # 139 signals at 11 different rates (mne: highest)
    ("BDF/test_bdf_stim_channel.bdf", ".bdf"),  # with a Status (stim) channel
    ("Brainvision/test_NO.vhdr", ".vhdr"),
])
def test_own_facts_equal_mne_bids_on_real_recordings(tmp_path, relative, extension):
    """Reference: mne-bids 0.20 read_raw_bids on MNE-Python testing data (named above)."""
    root = tmp_path / "bids"
    data = _as_bids(real_eeg(relative), root, extension)
    own = read_header_facts(root, data)
    assert own is not None, "the own reader should handle this recording"
    assert own == read_with_mne_bids(root, data)


def test_own_facts_equal_mne_bids_on_the_demo_and_pyedflib(demo_small, pyedflib_bids):
    """Reference: mne-bids 0.20 on the demo consortium's recordings (EDF and BrainVision
    sites, generated through mne-bids) and on pyedflib's shipped test_generator.edf."""
    cases = [(site.bids_root, path) for site in demo_small.sites
             for path in eeg_data_files(site.bids_root)[:3]]
    cases.append(pyedflib_bids)
    formats = set()
    for root, data in cases:
        own = read_header_facts(root, data)
        assert own is not None, data
        assert own == read_with_mne_bids(root, data), data
        formats.add(Path(data).suffix)
    assert formats == {".edf", ".vhdr"}


def test_bids_examples_placeholders_agree_with_mne_bids():
    """Reference: mne-bids 0.20 on the BIDS standard's EEG examples (zero-byte data files):
    where mne-bids reads a header (eeg_matchingpennies' .vhdr, whose .eeg is empty: 0
    samples) the own reader gives the same values; where mne-bids refuses the file
    (eeg_cbm's .edf, eeg_rishikesh's .bdf) the own reader gives nothing either and
    validation reports the empty file as a structure error."""
    if not EXAMPLES.is_dir():
        pytest.skip(f"the BIDS examples are not at {EXAMPLES}")
    seen = {}
    for dataset in ("eeg_cbm", "eeg_matchingpennies", "eeg_rishikesh"):
        root = EXAMPLES / dataset
        for data in eeg_data_files(root)[:4]:
            own = read_header_facts(root, data)
            try:
                reference = read_with_mne_bids(root, data)
            except HeaderError:
                reference = None
            assert own == reference, data
            seen[dataset] = reference is not None
        if not seen[dataset]:
            report = validate_dataset(root)
            assert any(p.code == "header.structure" and "empty" in p.message
                       for p in report.errors)
    assert seen == {"eeg_cbm": False, "eeg_matchingpennies": True, "eeg_rishikesh": False}


def test_eeglab_is_left_to_mne_bids(tmp_path):
    """MNE-Python testing data, EEGLAB/test_raw.set (32 channels, 128 Hz): the own reader
    leaves EEGLAB to mne-bids, and validation still reads its header there."""
    root = tmp_path / "bids"
    data = write_long_recording_bids(root)
    assert read_header_facts(root, data) is None
    report = validate_dataset(root)
    info = report.recordings[0]
    assert info.header_read and info.sfreq_hz == 128.0 and info.n_channels == 32


def test_validation_gives_the_same_report_as_with_mne_bids_alone(demo_small, monkeypatch):
    """Every demo site and the broken upload validated twice: with the own header reading,
    and with every file left to mne-bids (the reference, as validation read them before);
    the reports (index, errors, warnings) must be equal."""
    roots = [site.bids_root for site in demo_small.sites] + [demo_small.broken_upload]
    own = [validate_dataset(root, scale=DEMO_SCALE).as_dict() for root in roots]
    monkeypatch.setattr(validate_module, "read_header_facts", lambda *a, **k: None)
    reference = [validate_dataset(root, scale=DEMO_SCALE).as_dict() for root in roots]
    assert own == reference
    assert sum(len(report["recordings"]) for report in own) > 0
