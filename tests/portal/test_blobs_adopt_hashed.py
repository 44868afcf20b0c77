"""adopt_file with the sha256 already known (hashed while unpacking): stored under it without
reading the file again; where the bytes are read anyway (a copy to another disk, an upload to
the object store) a digest that does not match them stores nothing under that name. Both
stores; plumbing with invented bytes, sha256 checked against hashlib's."""

import hashlib

import pytest

from portal.datasets import blobs
from tests.object_store import object_store_server, use_object_store  # noqa: F401

pytestmark = pytest.mark.django_db

DATA = b"invented recording bytes\n" * 4000


@pytest.fixture(params=["local", "s3"])
def store(request, settings):
    if request.param == "s3":
        use_object_store(settings, request.getfixturevalue("object_store_server"))
    return blobs.store()


def test_known_digest_is_used_and_the_file_consumed(store, tmp_path):
    path = tmp_path / "a.eeg"
    path.write_bytes(DATA)
    expected = (hashlib.sha256(DATA).hexdigest(), len(DATA))
    assert blobs.adopt_file(path, expected[0]) == expected
    assert not path.exists()
    assert blobs.read_blob(expected[0]) == DATA
    again = tmp_path / "b.eeg"
    again.write_bytes(DATA)
    assert blobs.adopt_file(again, expected[0]) == expected and not again.exists()
    assert sorted(entry.name for entry in store.blobs()) == [expected[0]]


def test_a_digest_that_is_not_a_sha256_is_refused(store, tmp_path):
    path = tmp_path / "a.eeg"
    path.write_bytes(DATA)
    with pytest.raises(ValueError, match="not a sha256"):
        blobs.adopt_file(path, "../" + "0" * 61)
    assert path.exists()


def _wrong_claim_stores_nothing_under_it(tmp_path, store):
    path = tmp_path / "changed.eeg"
    path.write_bytes(DATA)
    claimed = hashlib.sha256(b"what the file held when it was hashed").hexdigest()
    with pytest.raises(blobs.BlobIntegrityError):
        blobs.adopt_file(path, claimed)
    assert not blobs.blob_exists(claimed)
    assert [entry.name for entry in store.unfinished()] == []


def test_object_store_checks_the_claimed_digest(settings, object_store_server, tmp_path):  # noqa: F811
    use_object_store(settings, object_store_server)
    _wrong_claim_stores_nothing_under_it(tmp_path, blobs.store())


def test_copy_to_another_disk_checks_the_claimed_digest(settings, tmp_path, monkeypatch):
    settings.BLOB_STORE = "local"
    monkeypatch.setattr(blobs, "_move", lambda source, target: False)  # as across devices
    _wrong_claim_stores_nothing_under_it(tmp_path, blobs.store())
