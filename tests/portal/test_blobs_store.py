"""The blob store, the same tests on both stores: the local folder and an S3-compatible object
store (a real server process on the loopback address, see tests/object_store.py).

Plumbing tests with invented bytes; sha256 values are checked against hashlib's.
"""

import hashlib
import io
import os
import time
import tracemalloc
import zipfile
from types import SimpleNamespace

import pytest
from django.urls import reverse

from portal.datasets import blobs
from portal.datasets.collect import collect
from tests.object_store import PART_BYTES, object_store_server, use_object_store  # noqa: F401

pytestmark = pytest.mark.django_db


@pytest.fixture(params=["local", "s3"])
def store(request, settings):
    if request.param == "s3":
        server = request.getfixturevalue("object_store_server")
        use_object_store(settings, server)
    return blobs.store()


class Pattern:
    """A stream of ``size`` invented bytes made as it is read (nothing held but one block)."""

    def __init__(self, size, seed=b"cairn"):
        self.size, self.sent = size, 0
        self.block = hashlib.sha256(seed).digest() * (65536 // 32)
        self.fail_after = None

    def read(self, n=-1):
        if self.fail_after is not None and self.sent >= self.fail_after:
            raise ConnectionResetError("the sender went away")
        n = self.size - self.sent if n is None or n < 0 else min(n, self.size - self.sent)
        offset = self.sent % len(self.block)
        piece = (self.block[offset:] + self.block)[:min(n, len(self.block))]
        self.sent += len(piece)
        return piece

    def sha256(self):
        copy = Pattern(self.size)
        copy.block = self.block
        return blobs.hash_stream(copy)


def stored_names(store):
    return sorted(entry.name for entry in store.blobs())


def leftovers(store):
    return [entry.name for entry in store.unfinished()]


def test_bytes_are_stored_once_under_their_sha256_and_read_back(store):
    data = b"An invented file.\n" * 100
    sha256, size = blobs.put_bytes(data)
    assert (sha256, size) == (hashlib.sha256(data).hexdigest(), len(data))
    assert blobs.put_bytes(data) == (sha256, size)
    assert blobs.put_stream(io.BytesIO(data)) == (sha256, size)
    assert stored_names(store) == [sha256]
    assert blobs.blob_exists(sha256)
    assert blobs.read_blob(sha256) == data
    with blobs.open_blob(sha256) as fh:
        assert fh.read(5) == data[:5]
        fh.seek(-7, io.SEEK_END)
        assert fh.read() == data[-7:]
        fh.seek(100)
        assert fh.tell() == 100 and fh.read(18) == data[100:118]
    assert leftovers(store) == []


def test_empty_blob(store):
    sha256, size = blobs.put_bytes(b"")
    assert sha256 == hashlib.sha256(b"").hexdigest() and size == 0
    assert blobs.read_blob(sha256) == b""


def test_missing_blob_and_bad_names(store, tmp_path):
    absent = hashlib.sha256(b"never stored").hexdigest()
    assert not blobs.blob_exists(absent)
    with pytest.raises(FileNotFoundError):
        blobs.open_blob(absent)
    with pytest.raises(FileNotFoundError):
        blobs.copy_blob_to(absent, tmp_path / "out")
    assert not (tmp_path / "out").exists()
    for bad in ("../etc/passwd", "A" * 64, "0" * 63):
        with pytest.raises(ValueError, match="not a sha256"):
            blobs.open_blob(bad)


def test_parquet_table_is_read_through_the_store(store):
    """pyarrow seeks to the footer and then to column chunks: the reader must be seekable."""
    import pandas as pd

    from cairn_science.features.pipeline import frame_to_parquet

    frame = pd.DataFrame({"site": ["a", "b", "c"], "value": [1.5, 2.5, 3.5]})
    sha256, _ = blobs.put_bytes(frame_to_parquet(frame))
    with blobs.open_blob(sha256) as fh:
        back = pd.read_parquet(fh, columns=["value"])
    assert back["value"].tolist() == [1.5, 2.5, 3.5]


def test_adopted_file_is_consumed_and_deduplicated(store, tmp_path):
    first = tmp_path / "a.bin"
    first.write_bytes(b"invented recording bytes" * 1000)
    sha256, size = blobs.adopt_file(first)
    assert not first.exists()
    again = tmp_path / "b.bin"
    again.write_bytes(b"invented recording bytes" * 1000)
    assert blobs.adopt_file(again) == (sha256, size) and not again.exists()
    assert stored_names(store) == [sha256]
    blobs.copy_blob_to(sha256, tmp_path / "copy" / "a.bin")
    assert (tmp_path / "copy" / "a.bin").read_bytes() == b"invented recording bytes" * 1000
    assert [p.name for p in (tmp_path / "copy").iterdir()] == ["a.bin"]  # no partial left


def test_large_stream_goes_up_in_parts_with_flat_memory(store, tmp_path):
    """A blob 9.6 parts long is stored and read back with Python's peak allocation below
    three parts (tracemalloc), i.e. memory does not grow with the blob."""
    size = int(PART_BYTES * 9.6)
    expected = Pattern(size).sha256()
    tracemalloc.start()
    try:
        assert blobs.put_stream(Pattern(size)) == expected
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.reset_peak()
        with blobs.open_blob(expected[0]) as fh:
            assert blobs.hash_stream(fh) == expected
        _, read_peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    print(f"{store.kind}: {size / 2**20:.0f} MiB blob, peak {peak / 2**20:.1f} MiB writing, "
          f"{read_peak / 2**20:.1f} MiB reading (part {PART_BYTES / 2**20:.0f} MiB)")
    assert peak < 3 * PART_BYTES and read_peak < 3 * PART_BYTES
    assert stored_names(store) == [expected[0]] and leftovers(store) == []
    # The same bytes adopted from a file: hashed first, then sent in parts under that name.
    path = tmp_path / "large.bin"
    with open(path, "wb") as sink:
        blobs.hash_stream(Pattern(size), sink)
    tracemalloc.start()
    try:
        assert blobs.adopt_file(path) == expected
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 3 * PART_BYTES and not path.exists()
    assert stored_names(store) == [expected[0]]


@pytest.mark.parametrize("size", [1000, int(PART_BYTES * 2.5)])
def test_broken_off_write_leaves_nothing(store, size):
    stream = Pattern(size)
    stream.fail_after = size // 2
    with pytest.raises(ConnectionResetError):
        blobs.put_stream(stream)
    assert stored_names(store) == [] and leftovers(store) == []


@pytest.fixture
def object_store(request, settings):
    """The portal's settings pointed at a new bucket of the test server."""
    server = request.getfixturevalue("object_store_server")
    return SimpleNamespace(server=server, bucket=use_object_store(settings, server))


def test_object_store_refuses_bytes_that_do_not_match_their_name(object_store):
    """A file that changes between hashing and sending is not stored under the first hash,
    in one request or in parts."""
    store = blobs.store()
    for size in (1000, int(PART_BYTES * 2.2)):
        claimed = hashlib.sha256(b"what the file held when it was hashed").hexdigest()
        with pytest.raises(blobs.BlobIntegrityError, match="nothing was kept"):
            store._upload(store.key(claimed), [], Pattern(size), expected=claimed)
        assert not blobs.blob_exists(claimed)
        assert stored_names(store) == [] and leftovers(store) == []


def test_object_store_reports_a_full_store(object_store, monkeypatch):
    from botocore.exceptions import ClientError

    store = blobs.store()

    def full(**kwargs):
        raise ClientError({"Error": {"Code": "InsufficientStorage", "Message": "full"},
                           "ResponseMetadata": {"HTTPStatusCode": 507}}, "PutObject")

    monkeypatch.setattr(store.client, "put_object", full)
    with pytest.raises(blobs.StorageFull, match="storage full: the object store answered "
                                                 "InsufficientStorage while writing"):
        blobs.put_bytes(b"no room for this")


def test_object_store_keys_follow_the_folder_layout(object_store, settings):
    settings.S3_PREFIX = "site-x/blobs/"
    sha256, _ = blobs.put_bytes(b"layout")
    keys = [o["Key"] for o in object_store.server.client().list_objects_v2(
        Bucket=object_store.bucket)["Contents"]]
    assert keys == [f"site-x/blobs/{sha256[:2]}/{sha256[2:4]}/{sha256}"]


def referenced_blob(data):
    """A blob that a dataset version's file refers to (invented plumbing)."""
    from portal.accounts.setup import add_site, add_study
    from portal.datasets.models import DatasetVersion, Upload, VersionFile

    study, _ = add_study("store", name="Store")
    site, _ = add_site("store-site", study_slug="store", name="Store site")
    upload = Upload.objects.create(site=site, study=study, source="test", label="a.zip",
                                   state="accepted")
    version = DatasetVersion.objects.create(site=site, study=study, number=1, upload=upload,
                                            manifest_sha256="1" * 64)
    sha256, size = blobs.put_bytes(data)
    VersionFile.objects.create(version=version, path="README", sha256=sha256, bytes=size)
    return sha256


def later(seconds):
    return SimpleNamespace(time=lambda: time.time() + seconds)


def test_collect_removes_unreferenced_old_blobs_and_unfinished_writes(store, monkeypatch,
                                                                      settings):
    kept = {referenced_blob(b"a version refers to this")}
    orphan, orphan_bytes = blobs.put_bytes(b"nothing refers to this")
    if store.kind == "s3":  # writes a killed process left: an upload begun, an object sent
        client = store.client
        for started in (int(time.time()), int(time.time()) + 7200):
            client.create_multipart_upload(Bucket=store.bucket,
                                           Key=f"{store.prefix}incoming/{started}-0a")
        client.put_object(Bucket=store.bucket, Key=f"{store.prefix}incoming/"
                          f"{int(time.time())}-0b", Body=b"partial")
        client.put_object(Bucket=store.bucket, Key="elsewhere/not-ours", Body=b"x")
    else:
        (settings.BLOB_ROOT / ".incoming-0b").write_bytes(b"partial")
    assert set(stored_names(store)) == kept | {orphan}
    assert collect()["blobs"] == []  # all younger than the grace period
    monkeypatch.setattr("portal.datasets.collect.time", later(7200 + 60))
    dry = collect(dry_run=True)
    assert orphan in dry["blobs"] and set(stored_names(store)) == kept | {orphan}
    done = collect()
    assert done["blobs"] == dry["blobs"]
    assert set(stored_names(store)) == kept
    reasons = {i["name"]: i["why"] for i in done["items"]}
    assert reasons[orphan] == "no version or result refers to it"
    assert orphan_bytes in [i["bytes"] for i in done["items"] if i["name"] == orphan]
    unfinished = [n for n, why in reasons.items() if why == "unfinished write"]
    if store.kind == "s3":
        # The old upload and the object go; the upload begun "now" (in the shifted clock)
        # stays although the server reports a start long ago for every upload.
        assert len(unfinished) == 2
        remaining = client.list_multipart_uploads(Bucket=store.bucket)["Uploads"]
        assert len(remaining) == 1 and remaining[0]["Key"].endswith("-0a")
        assert client.head_object(Bucket=store.bucket, Key="elsewhere/not-ours")
    else:
        assert unfinished == [".incoming-0b"]
    for sha256 in kept:
        assert blobs.read_blob(sha256)


def test_downloads_stream_from_the_store(client, store, demo_small, tmp_path):
    """A file and the whole version, downloaded through the portal's views, byte for byte
    (sha256 from hashlib against the files as generated)."""
    import shutil

    from portal.accounts.setup import add_site, add_study
    from portal.datasets.services import submit_path
    from portal.jobs import runner
    from portal.jobs.models import Job
    from tests.helpers import member

    info = demo_small.sites[0]
    root = tmp_path / info.slug
    shutil.copytree(info.bids_root, root)
    study, _ = add_study("rail", name="Rail")
    site, _ = add_site(info.slug, study_slug="rail", name=info.name)
    manager, _ = member("dm", role="data_manager", site_slug=info.slug)
    upload = submit_path(root, site=site, study=study, user=manager)
    runner.run(Job.objects.get(target_id=str(upload.pk), kind="upload.validate").pk)
    upload.refresh_from_db()
    assert upload.version is not None, upload.errors
    version = upload.version
    stored = set(stored_names(store))
    assert {f.sha256 for f in version.files.all()} <= stored
    client.force_login(manager)
    item = version.files.exclude(path__endswith=".tsv").exclude(
        path__endswith=".json").order_by("-bytes").first()
    response = client.get(reverse("datasets:download_file", args=[version.pk, item.pk]))
    assert response.streaming and int(response["Content-Length"]) == item.bytes
    assert b"".join(response.streaming_content) == (root / item.path).read_bytes()
    response = client.get(reverse("datasets:download_version", args=[version.pk]))
    archive = zipfile.ZipFile(io.BytesIO(b"".join(response.streaming_content)))
    for f in version.files.all():
        data = archive.read(f"{site.slug}-v1/{f.path}")
        assert hashlib.sha256(data).hexdigest() == f.sha256 == hashlib.sha256(
            (root / f.path).read_bytes()).hexdigest()
    if store.kind == "s3":  # nothing of the upload is kept on this machine
        assert not any(p.is_file() for p in settings_blob_root().rglob("*"))


def settings_blob_root():
    from django.conf import settings

    os.makedirs(settings.BLOB_ROOT, exist_ok=True)
    return settings.BLOB_ROOT


def test_check_blob_store_command(store, settings):
    from django.core.management import CommandError, call_command

    out = io.StringIO()
    call_command("check_blob_store", stdout=out)
    assert "writable" in out.getvalue() and leftovers(store) == []
    if store.kind == "s3":
        settings.S3_BUCKET = f"{store.bucket}-new"
        with pytest.raises(CommandError, match="the bucket does not exist: make it, or run "
                                               "check_blob_store --create-bucket"):
            call_command("check_blob_store", stdout=io.StringIO())
        out = io.StringIO()
        call_command("check_blob_store", "--create-bucket", stdout=out)
        assert "(bucket made): writable" in out.getvalue()
        assert blobs.put_bytes(b"into the new bucket")[0] in stored_names(blobs.store())
