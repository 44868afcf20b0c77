"""Identifying headers through the upload path: refused by default, or kept as a scrubbed copy
with only the original's hashes when the study allows it.

Source: pyedflib 0.1.42 ships ``pyedflib/data/test_generator.edf``, whose EDF+ patient field
(header bytes 8-88, EDF+ specification — from memory) gives a birth date; mne-bids 0.20 writes
it into a BIDS tree and mne carries that field along.
"""

import hashlib

import pytest

from cairn_science.bids.headers import read_edf_header
from portal.accounts.setup import add_site, add_study
from portal.datasets.models import VersionFile
from portal.datasets.services import staging_path, submit_path
from portal.jobs import runner
from portal.jobs.models import Job
from portal.studies.models import current_protocol, save_protocol
from tests.helpers import member

pytestmark = pytest.mark.django_db


@pytest.fixture
def lab(db):
    study, _ = add_study("rail", name="Rail")
    site, _ = add_site("north", study_slug="rail", name="North")
    user, _ = member("dm", role="data_manager", site_slug="north")
    return study, site, user


def ingest(lab, root, capture):
    study, site, user = lab
    upload = submit_path(root, site=site, study=study, user=user)
    job = Job.objects.get(kind="upload.validate", target_id=str(upload.pk))
    with capture(execute=True):
        runner.run(job.pk)
    upload.refresh_from_db()
    return upload


def test_identifying_header_is_refused_by_default(lab, pyedflib_bids,
                                                  django_capture_on_commit_callbacks):
    root, relpath = pyedflib_bids
    upload = ingest(lab, root, django_capture_on_commit_callbacks)
    assert upload.state == "rejected"
    assert any(e["path"] == relpath and "30-JUN-1969" in e["message"] for e in upload.errors), \
        upload.errors


def test_scrubbed_copy_is_kept_with_the_originals_hash(lab, pyedflib_bids,
                                                       django_capture_on_commit_callbacks,
                                                       settings):
    study = lab[0]
    protocol = current_protocol(study).data
    save_protocol(study, {**protocol, "deidentification": "scrub"}, user=None, note="scrub")
    root, relpath = pyedflib_bids
    original = hashlib.sha256((root / relpath).read_bytes()).hexdigest()
    upload = ingest(lab, root, django_capture_on_commit_callbacks)
    assert upload.state == "accepted", upload.errors
    item = VersionFile.objects.get(version=upload.version, path=relpath)
    assert item.original_sha256 == original and item.sha256 != original
    stored = settings.BLOB_ROOT / item.sha256[:2] / item.sha256[2:4] / item.sha256
    assert "1969" not in read_edf_header(stored).patient
    assert not (settings.BLOB_ROOT / original[:2] / original[2:4] / original).exists()
    assert not staging_path(upload).exists()
