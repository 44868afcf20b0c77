"""Tests of the demo-consortium generator (fixtures.demo), at its small scale."""

import csv
import hashlib
import json
import warnings

import mne
import mne_bids
import numpy as np
import pytest
from bids_validator import BIDSValidator
from bidsschematools.schema import load_schema
from scipy.signal import welch

from fixtures.demo import SCALES, generate
from fixtures.demo.__main__ import main

SEED = 7
DATA_SUFFIXES = {".edf", ".eeg"}
LEVELS = ("low", "moderate", "high")
POSTERIOR = ("O1", "O2", "Oz", "Pz", "P3", "P4", "POz", "PO3", "PO4")
FRONTAL = ("Fz", "F3", "F4", "FCz")

# The equipment asked of the three sites, in site order:
# (channels, sampling frequency in Hz, data-file extension, mains frequency in Hz).
EQUIPMENT = [(16, 125.0, ".edf", 50.0), (32, 256.0, ".vhdr", 50.0), (19, 250.0, ".edf", 60.0)]

# mne-bids maps participants.tsv columns into mne's subject info and warns about the
# BIDS-standard "handedness" column and our "experience_years", which mne has no field for.
pytestmark = pytest.mark.filterwarnings("ignore:Unable to map the following column")


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The small demo consortium, generated once for this module."""
    return generate(tmp_path_factory.mktemp("demo") / "out", scale="small", seed=SEED)


@pytest.fixture(scope="module")
def answer_key(demo):
    """The generator's record of everything it injected."""
    return json.loads(demo.answer_key.read_text(encoding="utf-8"))


def _digests(root):
    return {
        path.relative_to(root).as_posix(): hashlib.sha256(path.read_bytes()).hexdigest()
        for path in sorted(root.rglob("*"))
        if path.is_file()
    }


def _read_tsv(path):
    with path.open(encoding="utf-8", newline="") as handle:
        return list(csv.DictReader(handle, delimiter="\t"))


def _read(demo, record):
    """Read one answer-key recording with mne-bids; return the Raw and its data in volts."""
    path = demo.out_dir / record["bids_root"] / record["path"]
    raw = mne_bids.read_raw_bids(mne_bids.get_bids_path_from_fname(path), verbose=False)
    return raw, raw.get_data()


def _channel_positions(raw):
    positions = raw.get_montage().get_positions()["ch_pos"]
    return np.array([positions[name] for name in raw.ch_names])


def _scans(site):
    """(participant folder name, rows of its scans.tsv) for every participant of a site."""
    return [
        (scans.parent.parent.name, _read_tsv(scans))
        for scans in sorted(site.bids_root.glob("sub-*/ses-01/sub-*_ses-01_scans.tsv"))
    ]


def test_same_seed_gives_same_bytes_and_other_seed_other_data(demo, tmp_path, capsys):
    """Same seed: every file has the same sha256; another seed: every data file differs.

    Source of truth: the generator's contract (seeded, fixed meas_date), checked with
    hashlib's sha256. The second run goes through the command line.
    """
    assert main([str(tmp_path / "again"), "--scale", "small", "--seed", str(SEED)]) == 0
    summary = capsys.readouterr().out
    assert all(site.slug in summary for site in demo.sites)
    first = _digests(demo.out_dir)
    assert first == _digests(tmp_path / "again")

    generate(tmp_path / "other", scale=SCALES["small"], seed=SEED + 1)
    other = _digests(tmp_path / "other")
    data_files = [name for name in first if name[name.rfind(".") :] in DATA_SUFFIXES]
    assert len(data_files) == sum(4 * site.n_participants for site in demo.sites) + 4
    assert set(data_files) <= set(other)
    assert all(first[name] != other[name] for name in data_files)


def test_refuses_to_write_over_earlier_output(demo):
    """Generating into a folder that already holds demo output fails with a clear error.

    Source of truth: the generator's contract (no silent mixing of two runs).
    """
    with pytest.raises(FileExistsError, match="already holds demo output"):
        generate(demo.out_dir, scale="small", seed=SEED)


def test_every_recording_reads_back_with_site_equipment(demo):
    """Each data file loads with the right sfreq, channel count and mains frequency.

    Source of truth: the mne-bids reader (read_raw_bids), which takes SamplingFrequency,
    PowerLineFrequency and channels from the data file and the sidecars as the BIDS
    standard defines them; the electrode names must exist in mne's 10-20 template.
    """
    template = set(mne.channels.make_standard_montage("colin27_1020").ch_names)
    channel_sets = []
    assert len(demo.sites) == len(EQUIPMENT)
    for site, (n_channels, sfreq_hz, extension, line_hz) in zip(demo.sites, EQUIPMENT, strict=True):
        paths = mne_bids.find_matching_paths(
            site.bids_root, datatypes="eeg", suffixes="eeg", extensions=extension
        )
        assert len(paths) == 4 * site.n_participants
        for path in paths:
            raw = mne_bids.read_raw_bids(path, verbose=False)
            assert raw.info["sfreq"] == sfreq_hz
            assert len(raw.ch_names) == n_channels
            assert raw.info["line_freq"] == line_hz
            assert raw.n_times == round(SCALES["small"].block_s * sfreq_hz)
            assert set(raw.ch_names) <= template
            sidecar = json.loads(path.copy().update(extension=".json").fpath.read_text())
            for field in ("TaskName", "EEGReference", "SoftwareFilters", "Manufacturer"):
                assert sidecar[field]
        channel_sets.append(set(raw.ch_names))
    shared = set.intersection(*channel_sets)
    assert {"Fz", "Cz", "Pz", "O1", "O2", "F3", "F4", "P3", "P4", "C3", "C4"} <= shared


def test_file_names_follow_bids(demo):
    """Every file of every site dataset has a valid BIDS name and place.

    Source of truth: the bids-validator package's path check (BIDSValidator.is_bids).
    """
    validator = BIDSValidator()
    for site in demo.sites:
        files = [path for path in site.bids_root.rglob("*") if path.is_file()]
        assert files
        for path in files:
            assert validator.is_bids("/" + path.relative_to(site.bids_root).as_posix()), path


def test_outputs_hold_no_absolute_paths_and_key_lives_outside_bids(demo):
    """No file mentions the output folder; the answer key sits beside the datasets.

    Source of truth: the generator's contract (relocatable, reproducible output).
    """
    marker = str(demo.out_dir.resolve()).encode()
    for path in demo.out_dir.rglob("*"):
        if path.is_file():
            assert marker not in path.read_bytes(), path
    assert demo.answer_key.parent == demo.out_dir
    assert all(demo.answer_key.parent != site.bids_root for site in demo.sites)


def test_broken_upload_contradicts_its_data(demo, answer_key):
    """The broken upload's sidecars disagree with its EDF files, as the reason says.

    Source of truth: mne's EDF reader for what the data file holds; the mne-bids reader
    warns about the channels.tsv mismatch.
    """
    problems = answer_key["broken_upload"]["problems"]
    assert demo.broken_reason == answer_key["broken_upload"]["reason"]
    sampling, channels = problems
    sidecar = json.loads((demo.broken_upload / sampling["file"]).read_text())
    held = mne.io.read_raw_edf(demo.broken_upload / sampling["data_file"], verbose=False)
    assert sidecar["SamplingFrequency"] != held.info["sfreq"]
    assert f"{sidecar['SamplingFrequency']:g} Hz" in demo.broken_reason

    data_path = demo.broken_upload / channels["data_file"]
    listed = [row["name"] for row in _read_tsv(demo.broken_upload / channels["file"])]
    held = mne.io.read_raw_edf(data_path, verbose=False)
    assert set(listed) - set(held.ch_names) == {channels["extra_channel"]}
    assert channels["extra_channel"] in demo.broken_reason
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        mne_bids.read_raw_bids(mne_bids.get_bids_path_from_fname(data_path), verbose=False)
    assert any("does not match the number of channels" in str(w.message) for w in caught)
    assert len(list(demo.broken_upload.glob("sub-*"))) == 1


def _outside_segments(n_times, sfreq_hz, segments):
    keep = np.ones(n_times, bool)
    for segment in segments:
        start = int(segment["onset_s"] * sfreq_hz)
        keep[start : start + int(np.ceil(segment["duration_s"] * sfreq_hz)) + 1] = False
    return keep


def test_answer_key_matches_injected_faults(demo, answer_key):
    """Each listed fault is visible in the data where and as the key says.

    Flat: ~zero variance; noisy: variance far above the median channel; bridged: the
    pair's difference is tiny next to differences with other neighbours; popping: the
    largest sample-to-sample jump sits at a listed pop; bad segment: peak-to-peak far
    above the rest of the recording. Source: common practice, no source (the usual
    variance, neighbour and amplitude criteria of channel QC).
    """
    faulty = [r for r in answer_key["recordings"] if r["faulty_channels"] or r["bad_segments"]]
    kinds = {fault["kind"] for record in faulty for fault in record["faulty_channels"]}
    assert kinds == {"flat", "noisy", "bridged", "popping"}
    assert sum(bool(r["bad_segments"]) for r in faulty) >= 2 * len(demo.sites)
    for record in faulty:
        raw, data = _read(demo, record)
        sfreq_hz = raw.info["sfreq"]
        keep = _outside_segments(raw.n_times, sfreq_hz, record["bad_segments"])
        variance = data[:, keep].var(axis=1)
        median_variance = np.median(variance)
        positions = _channel_positions(raw)
        names = raw.ch_names
        for fault in record["faulty_channels"]:
            index = names.index(fault["name"])
            if fault["kind"] == "flat":
                assert variance[index] < 1e-6 * median_variance
            elif fault["kind"] == "noisy":
                assert variance[index] > 15 * median_variance
            elif fault["kind"] == "bridged":
                partner = names.index(fault["partner"])
                distance = np.linalg.norm(positions - positions[index], axis=1)
                neighbours = [i for i in np.argsort(distance)[1:5] if i != partner][:3]
                pair = np.var(data[index] - data[partner])
                others = [np.var(data[index] - data[i]) for i in neighbours]
                assert pair < 0.01 * min(others)
            else:
                jumps = np.abs(np.diff(data, axis=1)).max(axis=1)
                jump_at = int(np.argmax(np.abs(np.diff(data[index])))) + 1
                pops = np.round(np.array(fault["pop_onsets_s"]) * sfreq_hz)
                assert np.min(np.abs(pops - jump_at)) <= 1
                assert jumps[index] > 5 * np.median(jumps)
        if record["bad_segments"]:
            window = int(sfreq_hz)
            clean = data[:, keep]
            clean_ptp = np.median(
                [
                    np.ptp(clean[:, i : i + window], axis=1)
                    for i in range(0, clean.shape[1] - window, window)
                ]
            )
            for segment in record["bad_segments"]:
                start = int(segment["onset_s"] * sfreq_hz)
                stop = start + int(segment["duration_s"] * sfreq_hz)
                assert np.median(np.ptp(data[:, start:stop], axis=1)) > 3 * clean_ptp


def test_recordings_without_listed_faults_are_clean(demo, answer_key):
    """Most recordings carry no fault, and those have none of the fault signatures.

    Source: common practice, no source (same variance criteria as above; a channel that
    correlates with none of its three nearest neighbours above 1 Hz would be flagged as
    bad by correlation-based QC, so clean channels must).
    """
    clean = [
        r for r in answer_key["recordings"] if not r["faulty_channels"] and not r["bad_segments"]
    ]
    assert len(clean) > len(answer_key["recordings"]) / 2
    for record in clean:
        raw, data = _read(demo, record)
        variance = data.var(axis=1)
        assert variance.min() > 0.05 * np.median(variance)
        assert variance.max() < 8 * np.median(variance)
        rms_uv = np.sqrt(np.median(variance)) * 1e6
        assert 5 < rms_uv < 50
        highpassed = mne.filter.filter_data(data, raw.info["sfreq"], 1.0, None, verbose=False)
        correlation = np.corrcoef(highpassed)
        distance = np.linalg.norm(
            _channel_positions(raw)[:, None] - _channel_positions(raw)[None], axis=-1
        )
        nearest = np.argsort(distance, axis=1)[:, 1:4]
        best = np.take_along_axis(correlation, nearest, axis=1).max(axis=1)
        assert best.min() > 0.4


def _band_power(data, sfreq_hz, rows, band_hz):
    freqs_hz, psd = welch(data[rows], fs=sfreq_hz, nperseg=int(2 * sfreq_hz), average="median")
    in_band = (freqs_hz >= band_hz[0]) & (freqs_hz < band_hz[1])
    return psd[:, in_band].mean()


def test_alpha_falls_and_theta_rises_with_workload(demo, answer_key):
    """Posterior alpha (8-13 Hz) is weaker and frontal theta (4-8 Hz) stronger in high- than
    in low-difficulty blocks, on average over each site's participants.

    Source: scipy.signal.welch as reference for band power (median of 2 s segments, which
    shrugs off short bad segments); the direction of the effect: from memory. Channels the
    answer key lists as faulty are left out.
    """
    for site in demo.sites:
        by_participant = {}
        for record in answer_key["recordings"]:
            if record["site"] == site.slug and record["difficulty"] in ("low", "high"):
                by_participant.setdefault(record["participant_id"], {})[record["difficulty"]] = (
                    record
                )
        log_ratios = {"alpha": [], "theta": []}
        for blocks in by_participant.values():
            bad = {f["name"] for record in blocks.values() for f in record["faulty_channels"]}
            power = {}
            for level, record in blocks.items():
                raw, data = _read(demo, record)
                posterior = [
                    i
                    for i, name in enumerate(raw.ch_names)
                    if name in POSTERIOR and name not in bad
                ]
                frontal = [
                    i for i, name in enumerate(raw.ch_names) if name in FRONTAL and name not in bad
                ]
                sfreq_hz = raw.info["sfreq"]
                power[level] = (
                    _band_power(data, sfreq_hz, posterior, (8.0, 13.0)),
                    _band_power(data, sfreq_hz, frontal, (4.0, 8.0)),
                )
            log_ratios["alpha"].append(np.log(power["high"][0] / power["low"][0]))
            log_ratios["theta"].append(np.log(power["high"][1] / power["low"][1]))
        assert len(log_ratios["alpha"]) == site.n_participants
        assert np.mean(log_ratios["alpha"]) < 0, site.slug
        assert np.mean(log_ratios["theta"]) > 0, site.slug


def test_block_order_is_counterbalanced(demo):
    """Within each site every level appears in every run position, once per participant.

    Source: common practice, no source (counterbalancing so workload is not confounded
    with time on task). Read from the sessions' scans.tsv files.
    """
    for site in demo.sites:
        positions = {run: set() for run in (1, 2, 3)}
        sessions = _scans(site)
        assert len(sessions) == site.n_participants >= 3
        for _, rows in sessions:
            runs = [row for row in rows if "task-disruption" in row["filename"]]
            assert sorted(row["difficulty"] for row in runs) == sorted(LEVELS)
            for row in runs:
                run = int(row["filename"].split("_run-")[1].split("_")[0])
                positions[run].add(row["difficulty"])
        assert all(levels == set(LEVELS) for levels in positions.values()), site.slug


def test_scans_columns_are_described_and_match_the_key(demo, answer_key):
    """scans.tsv has difficulty and workload_rating, described in scans.json with BIDS
    column-description fields, and its values agree with the answer key.

    Source: the BIDS schema via bidsschematools (names of the column-description fields);
    rating bands 1-3 / 4-6 / 7-9: common practice, no source.
    """
    metadata_fields = set(load_schema().objects.metadata.keys())
    key = {(record["site"], record["path"]): record for record in answer_key["recordings"]}
    n_mismatch = 0
    n_rated = 0
    for site in demo.sites:
        for subject, rows in _scans(site):
            session = site.bids_root / subject / "ses-01"
            description = json.loads((session / f"{subject}_ses-01_scans.json").read_text())
            assert list(rows[0]) == ["filename", "acq_time", "difficulty", "workload_rating"]
            for column in rows[0]:
                assert description[column]["Description"]
                assert set(description[column]) <= metadata_fields
            for row in rows:
                assert (session / row["filename"]).is_file()
                assert row["difficulty"] in description["difficulty"]["Levels"]
                record = key[(site.slug, f"{subject}/ses-01/{row['filename']}")]
                assert row["difficulty"] == record["difficulty"]
                if row["difficulty"] == "rest":
                    assert row["workload_rating"] == "n/a"
                    continue
                rating = int(row["workload_rating"])
                assert rating == record["workload_rating"]
                assert row["workload_rating"] in description["workload_rating"]["Levels"]
                low, high = answer_key["rating_bands"][row["difficulty"]]
                n_rated += 1
                n_mismatch += not low <= rating <= high
                assert (not low <= rating <= high) == record["rating_mismatch"]
    assert 1 <= n_mismatch <= 0.15 * n_rated
