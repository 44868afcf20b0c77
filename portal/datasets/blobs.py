"""Content-addressed blob storage: a file is kept once under its sha256, written atomically.

A blob appears under its final name only when it is whole. A full disk (or an exhausted
quota) is reported as ``StorageFull``, with the half-written temporary file removed.
"""

import contextlib
import errno
import hashlib
import io
import os
import shutil
import tempfile
from pathlib import Path

from django.conf import settings

from portal.jobs.services import JobError

CHUNK_BYTES = 1024 * 1024

#: errno values of a full disk or an exhausted quota.
FULL_ERRNOS = (errno.ENOSPC, errno.EDQUOT)


class StorageFull(JobError):
    """The blob store (or the staging disk) has no room left; an operator has to free space."""

    def __init__(self, what, reason):
        super().__init__(f"storage full: {reason} while {what}. Ask an operator to free space, "
                         "then run it again")
        self.what = what
        self.reason = reason


@contextlib.contextmanager
def storage_errors(what):
    """Turn a full disk met while doing ``what`` into StorageFull; other errors pass."""
    try:
        yield
    except OSError as exc:
        if exc.errno not in FULL_ERRNOS:
            raise
        raise StorageFull(what, os.strerror(exc.errno).lower()) from exc


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


def _incoming(root):
    """A new temporary file in the store: (its path, the file open for writing)."""
    fd, tmp = tempfile.mkstemp(dir=root, prefix=".incoming-")
    return tmp, os.fdopen(fd, "wb")


def put_stream(stream):
    """Store a stream as a blob; returns (sha256, size). The same content is stored once."""
    root = Path(settings.BLOB_ROOT)
    tmp = None
    try:
        with storage_errors("writing a file into the blob store"):
            root.mkdir(parents=True, exist_ok=True)
            tmp, sink = _incoming(root)
            with sink:
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
        if tmp is not None and os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return sha256, size


def put_bytes(data):
    """Store bytes as a blob; returns (sha256, size)."""
    return put_stream(io.BytesIO(data))


def file_sha256(path):
    with open(path, "rb") as stream:
        return hash_stream(stream)[0]


def _move(source, target):
    """Rename ``source`` to ``target``; False when they lie on different file systems."""
    try:
        os.replace(source, target)
    except OSError as exc:
        if exc.errno == errno.EXDEV:
            return False
        raise
    return True


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
    with storage_errors("moving a file into the blob store"):
        target.parent.mkdir(parents=True, exist_ok=True)
        moved = _move(path, target)
    if not moved:  # another disk: copy instead
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
