"""Broken and malicious uploads through the real upload path: each is rejected with a message
naming the file, the field where there is one, and the defect; nothing is stored but the
upload's report and its audit events."""

import pytest

from fixtures.broken_archives import BROKEN_ARCHIVES
from fixtures.broken_bids import BROKEN_CASES, build_case
from portal.accounts.setup import add_site, add_study
from portal.datasets.models import (
    Block,
    DatasetVersion,
    Participant,
    Recording,
    UploadState,
    VersionFile,
)
from portal.datasets.services import submit_path
from portal.jobs import runner
from portal.jobs.models import Job
from tests.helpers import member

pytestmark = pytest.mark.django_db


@pytest.fixture
def lab(db):
    study, _ = add_study("rail", name="Rail")
    site, _ = add_site("north", study_slug="rail", name="North")
    user, _ = member("dm", role="data_manager", site_slug="north")
    return {"site": site, "study": study, "user": user}


def submit_and_validate(lab, source, capture):
    upload = submit_path(source, site=lab["site"], study=lab["study"], user=lab["user"])
    job = Job.objects.get(target_id=str(upload.pk), kind="upload.validate")
    with capture(execute=True):
        assert runner.run(job.pk) == "done"
    upload.refresh_from_db()
    return upload


def assert_nothing_stored(settings):
    for model in (DatasetVersion, VersionFile, Participant, Recording, Block):
        assert not model.objects.exists(), f"a rejected upload left {model.__name__} rows"
    assert not list(settings.BLOB_ROOT.glob("??/??/*")), "a rejected upload left blobs"
    assert not list(settings.STAGING_ROOT.glob("upload-*")), "its staged archive was kept"
    assert not [p for p in settings.STAGING_ROOT.glob("*") if p.is_dir()], "work folder left"


@pytest.mark.parametrize("case", BROKEN_ARCHIVES, ids=[c.name for c in BROKEN_ARCHIVES])
def test_broken_archive_is_rejected_and_leaves_nothing(case, lab, tmp_path, settings,
                                                       django_capture_on_commit_callbacks):
    """Archive defects as the zip and tar formats define them (Python's zipfile/tarfile)."""
    (tmp_path / "built").mkdir()
    archive = case.build(tmp_path / "built")
    upload = submit_and_validate(lab, archive, django_capture_on_commit_callbacks)
    assert upload.state == UploadState.REJECTED
    (problem,) = upload.errors
    assert problem["path"] == archive.name and problem["field"] == "archive"
    if case.expect_member:
        assert case.expect_member in problem["message"], problem["message"]
    for word in case.expect_words:
        assert word in problem["message"], problem["message"]
    assert_nothing_stored(settings)


@pytest.fixture(scope="module")
def clean_dataset(tmp_path_factory):
    from fixtures.broken_bids import build_clean_dataset

    return build_clean_dataset(tmp_path_factory.mktemp("clean") / "dataset")


def test_the_clean_base_dataset_is_accepted(lab, clean_dataset, django_capture_on_commit_callbacks):
    upload = submit_and_validate(lab, clean_dataset, django_capture_on_commit_callbacks)
    assert upload.state == UploadState.ACCEPTED, upload.errors


@pytest.mark.parametrize("case", BROKEN_CASES, ids=[c.name for c in BROKEN_CASES])
def test_broken_dataset_is_rejected_and_leaves_nothing(case, lab, clean_dataset, tmp_path,
                                                       settings,
                                                       django_capture_on_commit_callbacks):
    """BIDS defects as the BIDS specification (schema in bidsschematools) defines them."""
    broken = build_case(case, clean_dataset, tmp_path)
    upload = submit_and_validate(lab, broken, django_capture_on_commit_callbacks)
    assert upload.state == UploadState.REJECTED
    matching = [
        e for e in upload.errors
        if case.expect_path in (e["path"] or "")
        and (case.expect_field is None or e["field"] == case.expect_field)
        and all(w.lower() in e["message"].lower() for w in case.expect_words)
    ]
    assert matching, f"no error names {case.expect_path}, {case.expect_field} and " \
                     f"{case.expect_words}: {upload.errors}"
    assert_nothing_stored(settings)
