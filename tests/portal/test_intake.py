"""The upload path on the small demo consortium: staging, validation job, dataset version."""

import hashlib
import json

import pytest
from django.core.exceptions import PermissionDenied

from portal.accounts.setup import add_site, add_study
from portal.datasets.models import DatasetVersion, Upload
from portal.datasets.services import UploadError, submit_path
from portal.jobs import runner
from portal.jobs.models import Job, JobState
from tests.helpers import member

pytestmark = pytest.mark.django_db


@pytest.fixture
def rail(demo_small):
    study, _ = add_study("rail", name="Rail")
    people = {}
    sites = {}
    for site_info in demo_small.sites:
        sites[site_info.slug], _ = add_site(site_info.slug, study_slug="rail", name=site_info.name)
        people[site_info.slug], _ = member(f"dm-{site_info.slug}", role="data_manager",
                                               site_slug=site_info.slug)
    people["analyst"], _ = member("analyst", role="analyst",
                                      site_slug=demo_small.sites[0].slug)
    return study, sites, people


def validate(upload):
    job = Job.objects.get(target_type="datasets.upload", target_id=str(upload.pk))
    assert runner.run(job.pk) == "done"
    upload.refresh_from_db()
    job.refresh_from_db()
    assert job.state == JobState.DONE
    return job


def sha256(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_each_demo_site_is_accepted_and_indexed(demo_small, rail):
    """Files are kept byte for byte (sha256 of the generated files, hashlib as reference) and
    ratings are read from each session's scans.tsv as BIDS places per-recording values."""
    study, sites, people = rail
    key = json.loads(demo_small.answer_key.read_text())
    expected_ratings = {(r["site"], r["path"]): r["workload_rating"] for r in key["recordings"]}
    for site_info in demo_small.sites:
        upload = submit_path(site_info.bids_root, site=sites[site_info.slug], study=study,
                               user=people[site_info.slug])
        assert upload.state == "queued" and len(upload.archive_sha256) == 64
        validate(upload)
        assert upload.state == "accepted", upload.errors
        version = DatasetVersion.objects.get(upload=upload)
        recordings = list(version.recordings.all())
        assert len(recordings) == site_info.n_participants * 4  # rest + three difficulty runs
        for recording in recordings:
            assert recording.sha256 == sha256(site_info.bids_root / recording.path)
            assert recording.sfreq_hz == site_info.sfreq_hz
            assert recording.n_channels == site_info.n_channels
            assert recording.power_line_hz == site_info.power_line_hz
            (block,) = recording.blocks.all()  # one block per run in the demo design
            assert block.onset_s == 0 and block.duration_s == pytest.approx(recording.duration_s)
            assert block.rating == expected_ratings[(site_info.slug, recording.path)]
            if block.rating is not None:
                bins = {"low": (1, 3), "moderate": (4, 6), "high": (7, 9)}[block.level]
                assert bins[0] <= block.rating <= bins[1]
        files = set(version.files.values_list("path", flat=True))
        on_disk = {p.relative_to(site_info.bids_root).as_posix()
                   for p in site_info.bids_root.rglob("*") if p.is_file()}
        assert files == on_disk


def test_broken_upload_is_rejected_with_file_and_field(demo_small, rail):
    study, sites, people = rail
    source = json.loads(demo_small.answer_key.read_text())["broken_upload"]["copied_from"]["site"]
    upload = submit_path(demo_small.broken_upload, site=sites[source], study=study,
                           user=people[source])
    validate(upload)
    assert upload.state == "rejected"
    fields = {(e["field"], e["path"].rsplit("/", 1)[-1]) for e in upload.errors}
    assert ("SamplingFrequency", "sub-01_ses-01_task-rest_eeg.json") in fields
    assert any(e["field"] == "name" and "Oz" in e["message"] for e in upload.errors)
    assert not DatasetVersion.objects.filter(upload=upload).exists()


def test_only_the_sites_data_manager_may_upload(demo_small, rail):
    study, sites, people = rail
    first, second = demo_small.sites[0], demo_small.sites[1]
    with pytest.raises(PermissionDenied):
        submit_path(first.bids_root, site=sites[first.slug], study=study,
                      user=people["analyst"])
    with pytest.raises(PermissionDenied):
        submit_path(first.bids_root, site=sites[first.slug], study=study,
                      user=people[second.slug])
    assert not Upload.objects.exists()


def test_folder_without_dataset_description_is_rejected_by_validation(tmp_path, rail):
    study, sites, people = rail
    slug = next(iter(sites))
    (tmp_path / "sub-01").mkdir()
    (tmp_path / "sub-01" / "notes.txt").write_text("not a dataset")
    upload = submit_path(tmp_path, site=sites[slug], study=study, user=people[slug])
    validate(upload)
    assert upload.state == "rejected"
    assert any(e["path"] == "dataset_description.json" for e in upload.errors)
    assert not DatasetVersion.objects.exists()


def test_missing_source_is_refused_before_anything_is_stored(tmp_path, rail):
    study, sites, people = rail
    slug = next(iter(sites))
    with pytest.raises(UploadError, match="no such file or folder"):
        submit_path(tmp_path / "nowhere", site=sites[slug], study=study, user=people[slug])
    assert not Upload.objects.exists() and not Job.objects.exists()
