"""Broken and malicious uploads through the real upload path: each is rejected with a message
naming the file, the field where there is one, and the defect; nothing is stored but the
upload's report and its audit events."""

import pytest

from fixtures.broken_archives import BROKEN_ARCHIVES
from portal.accounts.setup import add_site, add_study
from portal.datasets.models import (
    Block, DatasetVersion, Participant, Recording, UploadState, VersionFile,
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
