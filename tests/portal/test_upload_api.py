"""Resumable uploads in chunks through the API: interruption, resumption, checksums."""

import hashlib
import io

import pytest
from django.urls import reverse

from portal.accounts.models import ApiToken
from portal.accounts.setup import add_site, add_study
from portal.datasets.models import Upload
from portal.datasets.services import staging_path
from portal.jobs.models import Job
from tests.helpers import member
from workers.archive import pack_folder

pytestmark = pytest.mark.django_db

CHUNK = 256 * 1024


@pytest.fixture
def lab(demo_small):
    add_study("rail", name="Rail")
    site_info = demo_small.sites[0]
    add_site(site_info.slug, study_slug="rail", name=site_info.name)
    add_site("other", study_slug="rail", name="Other lab")
    manager, _ = member("dm", role="data_manager", site_slug=site_info.slug)
    outsider, _ = member("dm-other", role="data_manager", site_slug="other")
    _, raw = ApiToken.issue(manager, "lab server")
    _, other_raw = ApiToken.issue(outsider, "other server")
    buffer = io.BytesIO()
    pack_folder(site_info.bids_root, buffer)
    return {"site": site_info.slug, "auth": f"Bearer {raw}", "other": f"Bearer {other_raw}",
            "archive": buffer.getvalue()}


def create(client, lab, size, auth=None):
    return client.post(
        reverse("api:uploads"), {"site": lab["site"], "study": "rail", "mode": "snapshot",
                                 "filename": "site.tar", "size": size},
        content_type="application/json", HTTP_AUTHORIZATION=auth or lab["auth"],
    )


def put(client, lab, upload_id, offset, data, auth=None):
    return client.put(
        reverse("api:upload_chunk", args=[upload_id]) + f"?offset={offset}", data,
        content_type="application/octet-stream", HTTP_AUTHORIZATION=auth or lab["auth"],
    )


def finish(client, lab, upload_id, sha256):
    return client.post(reverse("api:upload_finish", args=[upload_id]), {"sha256": sha256},
                       content_type="application/json", HTTP_AUTHORIZATION=lab["auth"])


def test_interrupted_upload_resumes_out_of_order_and_completes(client, lab):
    """The reference checksum is hashlib's sha256 of the archive bytes."""
    archive = lab["archive"]
    expected = hashlib.sha256(archive).hexdigest()
    response = create(client, lab, len(archive))
    assert response.status_code == 201, response.content
    upload_id = response.json()["upload"]
    offsets = list(range(0, len(archive), CHUNK))
    half = offsets[: len(offsets) // 2]
    for offset in half:
        assert put(client, lab, upload_id, offset, archive[offset:offset + CHUNK]).status_code \
            == 200
    # The connection broke off here; the client asks what is missing.
    status = client.get(reverse("api:upload", args=[upload_id]),
                        HTTP_AUTHORIZATION=lab["auth"]).json()
    assert status["state"] == "receiving"
    assert status["missing"] == [[half[-1] + CHUNK, len(archive)]]
    early = finish(client, lab, upload_id, expected)
    assert early.status_code == 400 and "missing" in early.json()["error"]
    rest = offsets[len(half):]
    for offset in reversed(rest):  # out of order
        put(client, lab, upload_id, offset, archive[offset:offset + CHUNK])
    put(client, lab, upload_id, 0, archive[:CHUNK])  # a repeated chunk
    response = finish(client, lab, upload_id, expected)
    assert response.status_code == 202, response.content
    upload = Upload.objects.get(pk=upload_id)
    assert upload.state == "queued" and upload.archive_sha256 == expected
    assert hashlib.sha256(staging_path(upload).read_bytes()).hexdigest() == expected
    assert Job.objects.filter(kind="upload.validate", target_id=str(upload_id)).count() == 1
    late = put(client, lab, upload_id, 0, archive[:CHUNK])
    assert late.status_code == 409


def test_wrong_final_checksum_is_rejected_and_the_bytes_dropped(
        client, lab, django_capture_on_commit_callbacks):
    archive = lab["archive"][: 3 * CHUNK]
    upload_id = create(client, lab, len(archive)).json()["upload"]
    for offset in range(0, len(archive), CHUNK):
        put(client, lab, upload_id, offset, archive[offset:offset + CHUNK])
    staged = staging_path(Upload.objects.get(pk=upload_id))
    with django_capture_on_commit_callbacks(execute=True):
        response = finish(client, lab, upload_id, "0" * 64)
    assert response.status_code == 422
    body = response.json()
    assert body["state"] == "rejected" and body["errors"][0]["field"] == "sha256"
    assert "checksum mismatch" in body["errors"][0]["message"]
    assert not staged.exists()
    assert not Job.objects.filter(kind="upload.validate").exists()


def test_chunk_past_the_announced_size_and_bad_announcements_are_refused(client, lab):
    upload_id = create(client, lab, 10).json()["upload"]
    response = put(client, lab, upload_id, 8, b"abcd")
    assert response.status_code == 400 and response.json()["field"] == "offset"
    assert create(client, lab, -5).json()["field"] == "size"
    assert create(client, lab, "12").status_code == 400


def test_another_sites_manager_cannot_touch_the_upload(client, lab):
    upload_id = create(client, lab, 10).json()["upload"]
    assert put(client, lab, upload_id, 0, b"0123456789", auth=lab["other"]).status_code == 404
    assert client.get(reverse("api:upload", args=[upload_id]),
                      HTTP_AUTHORIZATION=lab["other"]).status_code == 404
    assert create(client, lab, 10, auth=lab["other"]).status_code == 404
