"""Resumable uploads in chunks through the API: interruption, resumption, checksums."""

import hashlib
import io

import pytest
from django.test import Client
from django.urls import reverse

from cairn_science.archive import pack_folder
from portal.accounts.models import ApiToken
from portal.accounts.setup import add_site, add_study
from portal.datasets.models import Upload
from portal.datasets.services import staging_path
from portal.jobs.models import Job
from tests.helpers import member

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


# --- abandoned uploads, the staging quota, strict sizes, chunks outside transactions --------

def test_abandoned_upload_expires_and_its_staging_goes(client, lab, settings,
                                                      django_capture_on_commit_callbacks):
    from datetime import timedelta

    from django.core.management import call_command
    from django.utils import timezone

    settings.UPLOAD_ABANDONED_AFTER_S = 48 * 3600
    stale_id = create(client, lab, 20).json()["upload"]
    put(client, lab, stale_id, 0, b"0123456789")
    fresh_id = create(client, lab, 20).json()["upload"]
    stale = Upload.objects.get(pk=stale_id)
    assert stale.last_chunk_at is not None
    Upload.objects.filter(pk=stale_id).update(
        last_chunk_at=timezone.now() - timedelta(hours=49))
    Upload.objects.filter(pk=fresh_id).update(  # announced long ago, but a chunk came lately
        created_at=timezone.now() - timedelta(hours=60), last_chunk_at=timezone.now())
    out = io.StringIO()
    with django_capture_on_commit_callbacks(execute=True):
        call_command("collect_blobs", stdout=out)
    assert f"ended upload {stale_id} as failed: abandoned" in out.getvalue()
    assert f"removed staging {stale.staging_name} (10 bytes)" in out.getvalue()
    stale.refresh_from_db()
    assert stale.state == "failed"
    assert stale.failure == "abandoned: no chunk for 48 hours; start again"
    assert not staging_path(stale).exists()
    body = client.get(reverse("api:upload", args=[stale_id]),
                      HTTP_AUTHORIZATION=lab["auth"]).json()
    assert body["state"] == "failed" and "start again" in body["failure"]
    assert put(client, lab, stale_id, 10, b"0123456789").status_code == 409
    fresh = Upload.objects.get(pk=fresh_id)
    assert fresh.state == "receiving" and staging_path(fresh).exists()


def test_beat_ends_abandoned_uploads_without_an_operator(client, lab, settings,
                                                         django_capture_on_commit_callbacks):
    """The clock that runs the sweeper also ends abandoned uploads (no cron needed)."""
    from datetime import timedelta

    from django.utils import timezone

    from portal.celery import app
    from portal.jobs.tasks import expire_uploads

    app.loader.import_default_modules()
    schedule = {entry["task"] for entry in app.conf.beat_schedule.values()}
    assert "cairn.expire_uploads" in schedule
    stale_id = create(client, lab, 20).json()["upload"]
    Upload.objects.filter(pk=stale_id).update(created_at=timezone.now() - timedelta(days=9))
    with django_capture_on_commit_callbacks(execute=True):
        assert expire_uploads() == 1
    assert Upload.objects.get(pk=stale_id).state == "failed"


def test_staging_quota_per_site_refuses_with_what_is_in_use(client, lab, settings):
    settings.SITE_STAGING_QUOTA_BYTES = 1000
    assert create(client, lab, 600).status_code == 201
    refused = create(client, lab, 500)
    assert refused.status_code == 400
    body = refused.json()
    assert body["field"] == "size"
    assert "600 bytes in uploads still receiving" in body["error"]
    assert "staging quota of 1000 bytes" in body["error"]
    assert create(client, lab, 400).status_code == 201  # what is left still fits
    assert create(client, lab, 100, auth=lab["other"]).status_code == 404  # not their site


@pytest.mark.parametrize("size", [True, False, 12.0, "12", None])
def test_size_must_be_a_whole_json_number(client, lab, size):
    response = create(client, lab, size)
    assert response.status_code == 400 and response.json()["field"] == "size"
    assert not Upload.objects.exists()


class SlowBody:
    """A request body read in pieces; ``on_read`` runs before each piece is given out."""

    def __init__(self, data, on_read):
        self.data, self.position, self.on_read = data, 0, on_read

    def read(self, n):
        self.on_read()
        piece = self.data[self.position:self.position + min(n, 4096)]
        self.position += len(piece)
        return piece


@pytest.mark.django_db(transaction=True)
def test_a_slow_chunk_is_received_outside_any_transaction(lab):
    from django.db import connection

    from portal.datasets.services import write_chunk

    data = bytes(range(256)) * 64
    upload = Upload.objects.get(pk=create(Client(), lab, len(data)).json()["upload"])
    inside = []
    write_chunk(upload.pk, offset=0, length=len(data),
                stream=SlowBody(data, lambda: inside.append(connection.in_atomic_block)))
    assert inside and not any(inside), "the body was read inside a transaction"
    upload.refresh_from_db()
    assert upload.received == [[0, len(data)]]
    assert staging_path(upload).read_bytes() == data


def test_chunk_for_an_upload_that_ended_meanwhile_is_dropped(client, lab):
    """The state is checked again, under the row lock, after the slow body arrived."""
    from portal.datasets.services import UploadError, staging_root, write_chunk

    upload_id = create(client, lab, 8192).json()["upload"]

    def ended_meanwhile():
        Upload.objects.filter(pk=upload_id).update(state="failed")

    with pytest.raises(UploadError) as refused:
        write_chunk(upload_id, offset=0, length=8192,
                    stream=SlowBody(b"\1" * 8192, ended_meanwhile))
    assert refused.value.field == "state"
    upload = Upload.objects.get(pk=upload_id)
    assert upload.received == [] and staging_path(upload).read_bytes() == b""
    assert sorted(p.name for p in staging_root().iterdir()) == [upload.staging_name]
