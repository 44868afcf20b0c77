"""Content-addressed blob storage: a file is kept once under its sha256, written atomically."""

import hashlib
import io
import os
import shutil
import tempfile
from pathlib import Path

from django.conf import settings

CHUNK_BYTES = 1024 * 1024


def blob_path(sha256):
    if len(sha256) != 64 or any(c not in "0123456789abcdef" for c in sha256):
        raise ValueError(f"not a sha256 hex digest: {sha256!r}")
    return Path(settings.BLOB_ROOT) / sha256[:2] / sha256[2:4] / sha256


def hash_stream(stream, sink=None):
    """sha256 and size of a stream read in chunks, copying to ``sink`` if given."""
    digest = hashlib.sha256()
    size = 0
    while chunk := stream.read(CHUNK_BYTES):
        digest.update(chunk)
        size += len(chunk)
        if sink is not None:
            sink.write(chunk)
    return digest.hexdigest(), size


def put_stream(stream):
    """Store a stream as a blob; returns (sha256, size). The same content is stored once."""
    root = Path(settings.BLOB_ROOT)
    root.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=root, prefix=".incoming-")
    try:
        with os.fdopen(fd, "wb") as sink:
            sha256, size = hash_stream(stream, sink)
            sink.flush()
            os.fsync(sink.fileno())
        target = blob_path(sha256)
        if target.exists():
            os.unlink(tmp)
        else:
            target.parent.mkdir(parents=True, exist_ok=True)
            os.replace(tmp, target)
            target.chmod(0o444)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return sha256, size


def put_bytes(data):
    """Store bytes as a blob; returns (sha256, size)."""
    return put_stream(io.BytesIO(data))


def file_sha256(path):
    with open(path, "rb") as stream:
        return hash_stream(stream)[0]


def adopt_file(path):
    """Store a file that may be consumed (a freshly unpacked upload): it is moved into the
    store, not copied, when it lies on the same disk. Returns (sha256, size)."""
    path = Path(path)
    with open(path, "rb") as stream:
        sha256, size = hash_stream(stream)
    target = blob_path(sha256)
    if target.exists():
        path.unlink()
        return sha256, size
    target.parent.mkdir(parents=True, exist_ok=True)
    try:
        os.replace(path, target)
    except OSError:  # another disk: copy instead
        with open(path, "rb") as stream:
            put_stream(stream)
        path.unlink()
        return sha256, size
    target.chmod(0o444)
    return sha256, size


def put_file(path):
    with open(path, "rb") as stream:
        return put_stream(stream)


def open_blob(sha256):
    return open(blob_path(sha256), "rb")


def copy_blob_to(sha256, destination):
    destination = Path(destination)
    destination.parent.mkdir(parents=True, exist_ok=True)
    shutil.copyfile(blob_path(sha256), destination)
