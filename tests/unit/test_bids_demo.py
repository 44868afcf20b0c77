"""The small demo consortium is accepted with its ratings; its broken upload is refused.

The expected values come from the demo generator's answer key (fixtures.demo), which
records what it wrote: conditions, ratings and rating bands per recording, and the two
defects planted in the broken upload.
"""

import hashlib
import json

import pytest

from cairn_science.bids.index import pybids_agreement
from cairn_science.bids.validate import validate_dataset

# The demo's scale: 1-9 in three bins, as its README and scans.json describe it.
DEMO_SCALE = {"min": 1, "max": 9, "levels": [{"name": "low", "min": 1, "max": 3},
                                              {"name": "moderate", "min": 4, "max": 6},
                                              {"name": "high", "min": 7, "max": 9}]}


@pytest.fixture(scope="module")
def answer_key(demo_small):
    return json.loads(demo_small.answer_key.read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def site_reports(demo_small):
    return {site.slug: validate_dataset(site.bids_root, scale=DEMO_SCALE)
            for site in demo_small.sites}


def test_every_site_is_accepted_with_its_equipment(demo_small, site_reports):
    """Each site's dataset passes; every recording is read with the site's sampling rate and
    channel count (demo generator's manifest)."""
    for site in demo_small.sites:
        report = site_reports[site.slug]
        assert report.ok, report.errors
        assert report.recordings
        for info in report.recordings:
            assert info.header_read
            assert (info.sfreq_hz, info.n_channels) == (site.sfreq_hz, site.n_channels)
            assert info.power_line_hz == site.power_line_hz


def test_ratings_conditions_and_levels_match_the_answer_key(site_reports, answer_key):
    """Condition, rating and level of every recording (one block each, from scans.tsv) are
    those the generator wrote (demo answer key)."""
    expected = {(item["site"], item["path"]): item for item in answer_key["recordings"]}
    seen = set()
    for slug, report in site_reports.items():
        for info in report.recordings:
            item = expected[(slug, info.path)]
            seen.add((slug, info.path))
            (block,) = info.blocks
            assert block.onset_s == 0 and block.duration_s == info.duration_s
            assert (block.condition, block.rating, block.level) == (
                item["difficulty"], item["workload_rating"], item["rating_band"])
            assert (info.condition, info.rating, info.level) == (
                block.condition, block.rating, block.level)
    assert seen == set(expected)


def test_unrated_rest_baseline_gives_no_warning(site_reports):
    """The resting baseline's rating is n/a and its condition is listed as unrated, so it
    is kept without a label and without a warning (common practice, no source)."""
    for report in site_reports.values():
        rest = [info for info in report.recordings if info.condition == "rest"]
        assert rest and all(info.rating is None for info in rest)
        assert not [p for p in report.warnings if p.code == "ratings.missing"]


def test_broken_upload_names_sampling_rate_and_extra_channel(demo_small, answer_key):
    """The broken upload is refused with an error on each planted defect: the sidecar's
    SamplingFrequency and the channel that the data file lacks (demo answer key)."""
    report = validate_dataset(demo_small.broken_upload, scale=DEMO_SCALE)
    assert not report.ok
    sfreq, channel = answer_key["broken_upload"]["problems"]
    assert any(e.path == sfreq["file"] and e.field == "SamplingFrequency"
               and f"{sfreq['sidecar_value']:g} Hz" in e.message
               and f"{sfreq['data_value']:g} Hz" in e.message for e in report.errors)
    assert any(e.path == channel["file"] and e.field == "name" and e.line is not None
               and repr(channel["extra_channel"]) in e.message for e in report.errors)


@pytest.mark.parametrize("stored", ["report", "header facts only"])
def test_known_files_are_not_read_again(demo_small, site_reports, monkeypatch, stored):
    """With ``known`` from an earlier run (whole index entries, or only the header facts a
    caller keeps), unchanged files (same SHA-256) are not opened (by mne-bids or the own
    header reading) and give the same index (common practice, no source)."""
    site = demo_small.sites[0]
    first = site_reports[site.slug].as_dict()
    keep = ("sha256", "sfreq_hz", "n_channels", "channel_names", "duration_s")
    known = {info["sha256"]: info if stored == "report" else {k: info[k] for k in keep}
             for info in first["recordings"]}

    def refuse(*args, **kwargs):
        raise AssertionError("read again")

    monkeypatch.setattr("cairn_science.bids.validate.read_with_mne_bids", refuse)
    monkeypatch.setattr("cairn_science.bids.validate.read_header_facts", refuse)
    second = validate_dataset(site.bids_root, scale=DEMO_SCALE, known=known).as_dict()
    assert second["recordings"] == first["recordings"]
    assert second["errors"] == []


def test_sha256_is_the_file_digest(site_reports, demo_small):
    """Each recording carries the SHA-256 of its data file (hashlib over the whole file)."""
    site = demo_small.sites[0]
    for info in site_reports[site.slug].recordings:
        digest = hashlib.sha256((site.bids_root / info.path).read_bytes()).hexdigest()
        assert info.sha256 == digest


def test_progress_is_reported_per_data_file(demo_small):
    """``on_file(done, total)`` is called once per EEG data file, in order (common practice,
    no source)."""
    calls = []
    site = demo_small.sites[1]
    report = validate_dataset(site.bids_root, read_data=False,
                              on_file=lambda done, total: calls.append((done, total)))
    total = len(report.recordings)
    assert calls == [(done, total) for done in range(1, total + 1)]


@pytest.mark.parametrize("index", [0, 1, 2])
def test_pybids_agrees_on_demo_sites(demo_small, index):
    """pybids' index of each demo site equals Cairn's (pybids 0.22)."""
    assert pybids_agreement(demo_small.sites[index].bids_root) == []


def test_as_dict_keeps_the_stored_keys(site_reports):
    """The worker stores ``as_dict()``: errors, warnings and recordings keep their keys, and
    every problem has path, line, field and message."""
    result = next(iter(site_reports.values())).as_dict()
    assert {"errors", "warnings", "recordings"} <= set(result)
    for problem in result["warnings"]:
        assert {"path", "line", "field", "message"} <= set(problem)
    for info in result["recordings"]:
        assert {"path", "participant", "session", "task", "run", "sfreq_hz", "n_channels",
                "duration_s", "power_line_hz", "condition", "rating", "blocks",
                "sha256"} <= set(info)
