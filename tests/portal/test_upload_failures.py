"""Uploads whose validation fails, and what they leave behind (issue 13): the failed state with
a next step, collection of staging and work folders, a full blob store, and the CSRF check
made before any byte of a web upload is written."""

import errno
import hashlib
import io
import json
import os
import time
from datetime import timedelta
from pathlib import Path
from types import SimpleNamespace

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile
from django.core.management import call_command
from django.db import OperationalError
from django.test import Client
from django.urls import reverse
from django.utils import timezone

from portal.accounts.models import ApiToken
from portal.accounts.setup import add_site, add_study
from portal.audit.models import Event
from portal.datasets import blobs
from portal.datasets.models import DatasetVersion, Upload, UploadState, VersionFile
from portal.datasets.services import (
    staging_path,
    staging_root,
    submit_path,
    temporary_dir,
    validation_failed,
)
from portal.jobs import runner, services
from portal.jobs.models import Job, JobState
from tests.helpers import member

pytestmark = pytest.mark.django_db


@pytest.fixture
def lab(demo_small):
    info = demo_small.sites[0]
    study, _ = add_study("rail", name="Rail")
    site, _ = add_site(info.slug, study_slug="rail", name=info.name)
    manager, _ = member("dm", role="data_manager", site_slug=info.slug)
    _, raw = ApiToken.issue(manager, "lab server")
    return SimpleNamespace(info=info, study=study, site=site, user=manager,
                           auth=f"Bearer {raw}")


def submit(lab):
    return submit_path(lab.info.bids_root, site=lab.site, study=lab.study, user=lab.user)


def job_of(upload):
    return Job.objects.get(kind="upload.validate", target_id=str(upload.pk))


def crash_validation(monkeypatch, exc):
    """Make the real validation handler fail half-way, after the upload became "validating"."""
    import cairn_science.bids.validate

    def crash(*args, **kwargs):
        assert Upload.objects.get().state == UploadState.VALIDATING
        raise exc

    monkeypatch.setattr(cairn_science.bids.validate, "validate_dataset", crash)


def fail_upload(lab, monkeypatch, settings, how):
    """Submit the demo site and make its validation job end failed in one of four ways."""
    upload = submit(lab)
    job = job_of(upload)
    if how == "error":  # the handler's own JobError
        staging_path(upload).unlink()
        assert runner.run(job.pk) == "failed"
    elif how == "internal":
        crash_validation(monkeypatch, RuntimeError("a bug"))
        assert runner.run(job.pk) == "failed"
    elif how == "transient":
        settings.JOB_TRANSIENT_RETRIES = 0
        crash_validation(monkeypatch, OperationalError("the database system is shutting down"))
        assert runner.run(job.pk) == "failed"
    else:  # "lost": the worker stopped each time
        settings.JOB_MAX_ATTEMPTS = 1
        services.claim(job.pk, "w1")
        Job.objects.filter(pk=job.pk).update(
            lease_expires_at=timezone.now() - timedelta(seconds=1))
        services.sweep()
    upload.refresh_from_db()
    job.refresh_from_db()
    return upload, job


@pytest.mark.parametrize("how, words", [
    ("error", "Send the dataset again"),
    ("internal", "Ask an operator to look at job {job}"),
    ("transient", "Ask an operator to look at job {job}"),
    ("lost", "Ask an operator to look at job {job}"),
])
def test_failed_validation_ends_the_upload_failed_with_a_next_step(
        lab, monkeypatch, settings, client, how, words):
    upload, job = fail_upload(lab, monkeypatch, settings, how)
    assert job.state == JobState.FAILED
    assert upload.state == UploadState.FAILED and upload.finished_at is not None
    assert upload.failure == job.error
    assert words.format(job=job.pk) in upload.next_step
    assert Event.objects.filter(verb="upload.failed", target_id=str(upload.pk)).count() == 1
    # The page says it, and stops polling.
    client.force_login(lab.user)
    page = client.get(reverse("datasets:upload", args=[upload.pk])).content.decode()
    assert 'data-upload-state="failed"' in page and "hx-trigger" not in page
    assert upload.next_step.split(";")[0] in page
    # So does the API.
    body = client.get(reverse("api:upload", args=[upload.pk]),
                      HTTP_AUTHORIZATION=lab.auth).json()
    assert body["state"] == "failed"
    assert (body["failure"], body["next_step"]) == (job.error, upload.next_step)


def test_failure_hook_is_idempotent_and_leaves_final_uploads_alone(lab, monkeypatch, settings):
    upload, job = fail_upload(lab, monkeypatch, settings, "internal")
    assert validation_failed(job, "internal") is False  # already failed: nothing changes
    assert Event.objects.filter(verb="upload.failed").count() == 1
    for final in (UploadState.ACCEPTED, UploadState.REJECTED):
        other = submit(lab)
        Upload.objects.filter(pk=other.pk).update(state=final)
        other_job = job_of(other)
        other_job.error = "late failure"
        assert validation_failed(other_job, "internal") is False
        other.refresh_from_db()
        assert other.state == final and other.failure == ""


@pytest.mark.django_db(transaction=True)
def test_upload_bids_reports_a_failed_validation_in_json(lab, monkeypatch):
    """The command waits for the job (run here at once, as a worker would), prints the
    failure and its next step, and exits with status 2."""
    monkeypatch.setattr(services, "send", lambda job_id: runner.run(job_id) and True)
    crash_validation(monkeypatch, RuntimeError("a bug"))
    out = io.StringIO()
    with pytest.raises(SystemExit) as exit_status:
        call_command("upload_bids", str(lab.info.bids_root), "--site", lab.site.slug,
                     "--study", "rail", "--as-user", "dm", "--wait", "--json", stdout=out)
    assert exit_status.value.code == 2
    report = json.loads(out.getvalue())
    job = Job.objects.get(kind="upload.validate")
    assert report["state"] == "failed" and report["failure"] == job.error
    assert f"job {job.pk}" in report["next_step"]


# --- collect_blobs ---------------------------------------------------------------------------

def age(path, seconds=7200):
    old = time.time() - seconds
    for item in [path, *path.rglob("*")] if path.is_dir() else [path]:
        os.utime(item, (old, old))


def leftover_work_folder(job, token, size=1000):
    """The work folder a validation makes (named by ``temporary_dir``), as a killed worker
    leaves it: still there, with a file in it."""
    with temporary_dir(job, token) as made:
        name = Path(made).name
    folder = staging_root() / name
    (folder / "incoming").mkdir(parents=True)
    (folder / "incoming" / "eeg.edf").write_bytes(b"\0" * size)
    return folder


def test_collect_removes_failed_staging_and_stopped_work_folders_after_grace(
        lab, monkeypatch, settings):
    upload, job = fail_upload(lab, monkeypatch, settings, "internal")
    archive = staging_path(upload)
    assert archive.exists()  # kept for a while, e.g. for an operator to look at
    stopped = leftover_work_folder(job, "0" * 32)
    running = submit(lab)
    running_job = job_of(running)
    token = services.claim(running_job.pk, "w2")
    in_use = leftover_work_folder(running_job, token)
    out = io.StringIO()
    call_command("collect_blobs", stdout=out)  # everything is younger than the grace period
    assert archive.exists() and stopped.exists() and in_use.exists()
    for path in (archive, stopped, in_use):
        age(path)
    out = io.StringIO()
    call_command("collect_blobs", "--dry-run", stdout=out)
    listed = out.getvalue()
    assert archive.exists() and stopped.exists()
    assert archive.name in listed and stopped.name in listed and in_use.name not in listed
    expected_bytes = archive.stat().st_size + 1000
    assert f"would remove 0 blob(s) and 2 staging entries: {expected_bytes} bytes" in listed
    out = io.StringIO()
    call_command("collect_blobs", stdout=out)
    assert not archive.exists() and not stopped.exists() and in_use.exists()
    assert staging_path(running).exists()  # a live upload's archive stays
    said = out.getvalue()
    assert f"removed staging {archive.name} ({upload.archive_bytes} bytes): archive of upload " \
        f"{upload.pk}, which is failed" in said
    assert f"removed 0 blob(s) and 2 staging entries: {expected_bytes} bytes" in said


# --- a full blob store -----------------------------------------------------------------------

class FillsUp:
    """A file that takes ``room[0]`` more bytes, then fails as a full disk does."""

    def __init__(self, sink, room):
        self.sink, self.room = sink, room

    def write(self, data):
        if len(data) > self.room[0]:
            self.sink.write(data[: self.room[0]])
            self.room[0] = 0
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        self.room[0] -= len(data)
        return self.sink.write(data)

    def __getattr__(self, name):
        return getattr(self.sink, name)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.sink.close()


def disk_with_room(monkeypatch, room_bytes):
    room = [room_bytes]
    real = blobs._incoming

    def incoming(root):
        tmp, sink = real(root)
        return tmp, FillsUp(sink, room)

    monkeypatch.setattr(blobs, "_incoming", incoming)
    return room


def stored_blobs(settings):
    root = Path(settings.BLOB_ROOT)
    return list(root.glob("??/??/*")), list(root.glob(".incoming-*"))


def test_full_store_leaves_no_half_written_blob(settings, monkeypatch):
    room = disk_with_room(monkeypatch, 100_000)
    with pytest.raises(blobs.StorageFull, match="storage full: no space left on device"):
        blobs.put_bytes(os.urandom(300_000))
    assert stored_blobs(settings) == ([], [])
    room[0] = 10_000  # an operator freed some space
    small = os.urandom(1000)
    sha256, _ = blobs.put_bytes(small)
    assert [p.name for p in stored_blobs(settings)[0]] == [sha256]


def test_full_store_fails_the_upload_with_storage_full_and_no_version(
        lab, settings, monkeypatch):
    """The store is on another disk (so files are copied into it) and fills up part-way."""
    monkeypatch.setattr(blobs, "_move", lambda source, target: False)
    disk_with_room(monkeypatch, 200_000)
    upload = submit(lab)
    job = job_of(upload)
    assert runner.run(job.pk) == "failed"
    job.refresh_from_db()
    upload.refresh_from_db()
    assert job.error.startswith(f"storage full: upload {upload.pk} ")
    assert "Ask an operator to free space" in job.error and "Internal error" not in job.error
    assert upload.state == UploadState.FAILED and upload.failure == job.error
    assert not DatasetVersion.objects.exists() and not VersionFile.objects.exists()
    whole, incoming = stored_blobs(settings)
    assert incoming == [] and whole, "some files fitted before the disk was full"
    for blob in whole:  # a blob exists only whole, under its own hash
        assert hashlib.sha256(blob.read_bytes()).hexdigest() == blob.name
    assert not list(staging_root().glob("work-*"))


# --- CSRF before a byte is written -----------------------------------------------------------

def form(token_in_body=None):
    data = {"study": "rail", "mode": "snapshot",
            "archive": SimpleUploadedFile("site.tar", b"x" * 50_000)}
    if token_in_body:
        data["csrfmiddlewaretoken"] = token_in_body
    return data


def staged_files():
    return [p for p in staging_root().iterdir()] if staging_root().exists() else []


def test_web_upload_refused_for_csrf_writes_nothing(lab):
    strict = Client(enforce_csrf_checks=True)
    strict.force_login(lab.user)
    url = reverse("datasets:upload_new", args=[lab.site.slug])
    assert strict.post(url, form()).status_code == 403
    assert staged_files() == []
    # A token in the body can only be read by reading the body, i.e. after the files were
    # written; it is not accepted either.
    strict.get(url)
    token = strict.cookies["csrftoken"].value
    assert strict.post(url, form(token)).status_code == 403
    assert strict.post(url, form(), HTTP_ACCEPT="application/json").json()["field"] == "csrf"
    assert staged_files() == [] and not Upload.objects.exists()


def test_web_upload_with_the_forms_token_is_received(lab):
    strict = Client(enforce_csrf_checks=True)
    strict.force_login(lab.user)
    page = strict.get(reverse("datasets:upload_new", args=[lab.site.slug]))
    token = page.context["csrf_token"]
    url = reverse("datasets:upload_new", args=[lab.site.slug]) + f"?csrf_token={token}"
    response = strict.post(url, form())
    assert response.status_code == 302, response.content[:300]
    upload = Upload.objects.get()
    assert upload.archive_bytes == 50_000 and staging_path(upload).exists()
