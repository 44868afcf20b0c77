"""Dataset versions: snapshots and additions, diffs, all-or-nothing indexing, downloads."""

import hashlib
import io
import json
import os
import shutil
import time
import zipfile

import pytest
from django.urls import reverse

from portal.accounts.setup import add_site, add_study
from portal.audit.models import Event
from portal.datasets import blobs
from portal.datasets.collect import collect
from portal.datasets.models import (
    Block,
    DatasetVersion,
    Participant,
    Recording,
    UploadMode,
    VersionFile,
)
from portal.datasets.services import submit_path
from portal.jobs import runner
from portal.jobs.models import Job
from tests.helpers import member

pytestmark = pytest.mark.django_db


@pytest.fixture
def site_dataset(demo_small, tmp_path):
    """A writable copy of one small demo site, and a data manager for it."""
    info = demo_small.sites[0]
    root = tmp_path / info.slug
    shutil.copytree(info.bids_root, root)
    study, _ = add_study("rail", name="Rail")
    site, _ = add_site(info.slug, study_slug="rail", name=info.name)
    manager, _ = member("dm", role="data_manager", site_slug=info.slug)
    return {"root": root, "site": site, "study": study, "user": manager, "info": info}


def ingest(data, source, mode=UploadMode.SNAPSHOT, allow_removals=False):
    upload = submit_path(source, site=data["site"], study=data["study"], user=data["user"],
                         mode=mode, allow_removals=allow_removals)
    job = Job.objects.get(target_id=str(upload.pk), kind="upload.validate")
    runner.run(job.pk)
    upload.refresh_from_db()
    return upload


def drop_subject(root, label):
    shutil.rmtree(root / f"sub-{label}")
    rows = (root / "participants.tsv").read_text().splitlines()
    kept = [r for r in rows if not r.startswith(f"sub-{label}\t")]
    (root / "participants.tsv").write_text("\n".join(kept) + "\n")


def test_snapshot_then_snapshot_gives_a_diff_by_hash(site_dataset):
    first = ingest(site_dataset, site_dataset["root"])
    assert first.state == "accepted", first.errors
    v1 = first.version
    assert v1.number == 1 and v1.parent is None and len(v1.diff["added"]) == v1.n_files
    drop_subject(site_dataset["root"], "03")
    readme = site_dataset["root"] / "README"
    readme.write_text(readme.read_text() + "\nSecond delivery.\n")
    second = ingest(site_dataset, site_dataset["root"], allow_removals=True)
    assert second.state == "accepted", second.errors
    v2 = second.version
    assert v2.number == 2 and v2.parent_id == v1.pk
    assert v2.diff["changed"] == sorted(["README", "participants.tsv"])
    assert v2.diff["removed"] and all(p.startswith("sub-03/") for p in v2.diff["removed"])
    assert not v2.diff["added"]
    assert not v2.files.filter(path__startswith="sub-03/").exists()
    assert v1.files.filter(path__startswith="sub-03/").exists()  # the old version is untouched
    assert v2.recordings.count() == v1.recordings.count() - 4


def test_addition_adds_and_replaces_but_never_removes(site_dataset, tmp_path):
    ingest(site_dataset, site_dataset["root"])
    addition = tmp_path / "addition"
    addition.mkdir()
    (addition / "CHANGES").write_text("1.0.1 one more note\n")
    (addition / "README").write_text("Replaced README.\n")
    upload = ingest(site_dataset, addition, mode=UploadMode.ADDITION)
    assert upload.state == "accepted", upload.errors
    version = upload.version
    assert version.diff["added"] == ["CHANGES"] and version.diff["changed"] == ["README"]
    assert version.diff["removed"] == []
    assert version.files.count() == version.parent.files.count() + 1


def test_crash_while_indexing_leaves_no_half_version(site_dataset, monkeypatch, settings):
    def crash(*args, **kwargs):
        raise RuntimeError("power cut")

    monkeypatch.setattr(Block.objects, "bulk_create", crash)
    upload = ingest(site_dataset, site_dataset["root"])
    job = Job.objects.get(target_id=str(upload.pk))
    assert job.state == "failed" and "power cut" in job.error
    for model in (DatasetVersion, VersionFile, Recording, Participant, Block):
        assert not model.objects.exists(), model.__name__
    stored = list(settings.BLOB_ROOT.glob("??/??/*"))
    assert stored, "blobs were written before the transaction"
    old = time.time() - 7200
    for path in stored:
        os.utime(path, (old, old))
    removed = collect(older_than_s=3600)
    assert len(removed["blobs"]) == len(stored)
    assert not list(settings.BLOB_ROOT.glob("??/??/*"))


def test_same_file_twice_is_stored_once(site_dataset, settings):
    ingest(site_dataset, site_dataset["root"])
    before = sorted(p.name for p in settings.BLOB_ROOT.glob("??/??/*"))
    ingest(site_dataset, site_dataset["root"])
    assert sorted(p.name for p in settings.BLOB_ROOT.glob("??/??/*")) == before
    assert DatasetVersion.objects.count() == 2


def test_downloads_are_checked_recorded_and_byte_exact(client, site_dataset):
    """Bytes compared with hashlib's sha256 of the files as generated."""
    upload = ingest(site_dataset, site_dataset["root"])
    version = upload.version
    client.force_login(site_dataset["user"])
    page = client.get(reverse("datasets:version", args=[version.pk])).content.decode()
    assert "Before you download" in page and "not a medical device" in page
    item = version.files.get(path="participants.tsv")
    response = client.get(reverse("datasets:download_file", args=[version.pk, item.pk]))
    assert b"".join(response.streaming_content) == (
        site_dataset["root"] / "participants.tsv").read_bytes()
    response = client.get(reverse("datasets:download_version", args=[version.pk]))
    archive = zipfile.ZipFile(io.BytesIO(b"".join(response.streaming_content)))
    folder = f"{site_dataset['site'].slug}-v1"
    for f in version.files.all():
        data = archive.read(f"{folder}/{f.path}")
        assert hashlib.sha256(data).hexdigest() == f.sha256
    assert Event.objects.filter(verb="download").count() == 2
    analyst, _ = member("auditor-x", role="auditor", site_slug=site_dataset["site"].slug)
    client.force_login(analyst)
    assert client.get(reverse("datasets:download_version", args=[version.pk])).status_code \
        == 200


def test_version_page_lists_ratings_and_levels(client, site_dataset, demo_small):
    upload = ingest(site_dataset, site_dataset["root"])
    key = json.loads(demo_small.answer_key.read_text())
    rated = [r for r in key["recordings"] if r["site"] == site_dataset["site"].slug
             and r["workload_rating"] is not None]
    blocks = Block.objects.filter(recording__version=upload.version, rating__isnull=False)
    assert blocks.count() == len(rated)
    client.force_login(site_dataset["user"])
    page = client.get(reverse("datasets:version", args=[upload.version.pk])).content.decode()
    assert f"{rated[0]['workload_rating']} (" in page
    assert blobs.blob_path(upload.version.files.first().sha256).exists()
