"""Content-addressed blob storage: a file is kept once under its sha256, written atomically.

Two stores hold blobs under the same names (``ab/cd/<sha256>``), chosen by
``settings.BLOB_STORE``:

- ``local``: the folder ``BLOB_ROOT``. A blob is written to a temporary file in the folder and
  renamed to its final name only when it is whole.
- ``s3``: an S3-compatible object store (``S3_BUCKET`` at ``S3_ENDPOINT_URL``, keys under
  ``S3_PREFIX``), which workers on several machines share. Large blobs go up as multipart
  uploads of ``S3_PART_BYTES`` parts, so memory stays about two parts; a blob gets its final key
  only after its sha256, computed while it streamed, matched. A write that fails is aborted
  (or its temporary object removed); whatever a killed process left under ``incoming/`` is
  removed by ``collect``.

Either way a full disk (or an exhausted quota) is reported as ``StorageFull`` with nothing
half-written left under a blob's name. Everything reads blobs through this module: ``open_blob``
(a seekable, streamed reader), ``read_blob`` (bytes) and ``copy_blob_to`` (a local copy, for
code such as mne that wants a file path).
"""

import base64
import contextlib
import errno
import hashlib
import io
import os
import re
import secrets
import shutil
import tempfile
import threading
import time
from dataclasses import dataclass
from pathlib import Path

from django.conf import settings

from portal.jobs.services import JobError

CHUNK_BYTES = 1024 * 1024

#: errno values of a full disk or an exhausted quota.
FULL_ERRNOS = (errno.ENOSPC, errno.EDQUOT)

#: Object-store answers that mean no room is left (HTTP 507 is checked as well).
FULL_CODES = {"InsufficientStorage", "QuotaExceeded", "StorageFull"}

SHA256 = re.compile(r"^[0-9a-f]{64}$")
#: A blob's name relative to the store's root: ab/cd/<sha256>.
BLOB_NAME = re.compile(r"^([0-9a-f]{2})/([0-9a-f]{2})/(\1\2[0-9a-f]{60})$")
#: Where the object store keeps writes in progress: incoming/<unix time>-<random>.
INCOMING = "incoming/"
INCOMING_NAME = re.compile(r"^incoming/(\d+)-[0-9a-f]+$")


class StorageFull(JobError):
    """The blob store (or the staging disk) has no room left; an operator has to free space."""

    def __init__(self, what, reason):
        super().__init__(f"storage full: {reason} while {what}. Ask an operator to free space, "
                         "then run it again")
        self.what = what
        self.reason = reason


class BlobStoreError(Exception):
    """The configured store cannot be reached or used; the message says which setting."""


class BlobIntegrityError(Exception):
    """Bytes read or written did not hash to the name they were stored under."""


@contextlib.contextmanager
def storage_errors(what):
    """Turn a full disk met while doing ``what`` into StorageFull; other errors pass."""
    try:
        yield
    except OSError as exc:
        if exc.errno not in FULL_ERRNOS:
            raise
        raise StorageFull(what, os.strerror(exc.errno).lower()) from exc


def check_sha256(sha256):
    if not isinstance(sha256, str) or not SHA256.match(sha256):
        raise ValueError(f"not a sha256 hex digest: {sha256!r}")
    return sha256


def blob_name(sha256):
    """The blob's name relative to the store's root (the same in both stores)."""
    check_sha256(sha256)
    return f"{sha256[:2]}/{sha256[2:4]}/{sha256}"


def blob_path(sha256):
    """Where the local store keeps a blob (only meaningful with BLOB_STORE=local)."""
    return Path(settings.BLOB_ROOT) / blob_name(sha256)


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


def file_sha256(path):
    with open(path, "rb") as stream:
        return hash_stream(stream)[0]


@dataclass
class Entry:
    """Something in the store for ``collect``: a blob or an unfinished write."""

    name: str
    bytes: int
    modified: float  # unix time of the last change
    handle: object = None  # what the store needs to remove it


# --- The local folder ---------------------------------------------------------------------


def _incoming(root):
    """A new temporary file in the store: (its path, the file open for writing)."""
    fd, tmp = tempfile.mkstemp(dir=root, prefix=".incoming-")
    return tmp, os.fdopen(fd, "wb")


def _move(source, target):
    """Rename ``source`` to ``target``; False when they lie on different file systems."""
    try:
        os.replace(source, target)
    except OSError as exc:
        if exc.errno == errno.EXDEV:
            return False
        raise
    return True


class LocalStore:
    kind = "local"

    def __init__(self, root):
        self.root = Path(root)

    def describe(self):
        return f"the folder {self.root}"

    def path(self, sha256):
        return self.root / blob_name(sha256)

    def put_stream(self, stream):
        tmp = None
        try:
            with storage_errors("writing a file into the blob store"):
                self.root.mkdir(parents=True, exist_ok=True)
                tmp, sink = _incoming(self.root)
                with sink:
                    sha256, size = hash_stream(stream, sink)
                    sink.flush()
                    os.fsync(sink.fileno())
                target = self.path(sha256)
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

    def adopt_file(self, path, sha256=None):
        if sha256 is None:
            with open(path, "rb") as stream:
                sha256, size = hash_stream(stream)
        else:
            size = path.stat().st_size
        target = self.path(sha256)
        if target.exists():
            path.unlink()
            return sha256, size
        with storage_errors("moving a file into the blob store"):
            target.parent.mkdir(parents=True, exist_ok=True)
            moved = _move(path, target)
        if not moved:  # another disk: copy instead
            with open(path, "rb") as stream:
                stored, _ = self.put_stream(stream)
            if stored != sha256:
                raise BlobIntegrityError(f"{path} reads as {stored}, not the {sha256} it was "
                                         "adopted as (it changed after it was hashed)")
            path.unlink()
            return sha256, size
        target.chmod(0o444)
        return sha256, size

    def open(self, sha256):
        return open(self.path(sha256), "rb")

    def exists(self, sha256):
        return self.path(sha256).is_file()

    def copy_to(self, sha256, destination):
        shutil.copyfile(self.path(sha256), destination)

    def blobs(self):
        if not self.root.exists():
            return
        for path in self.root.glob("??/??/*"):
            try:
                stat = path.stat()
            except FileNotFoundError:
                continue
            yield Entry(path.name, stat.st_size, stat.st_mtime, path)

    def unfinished(self):
        if not self.root.exists():
            return
        for path in self.root.glob(".incoming-*"):
            try:
                stat = path.stat()
            except FileNotFoundError:
                continue
            yield Entry(path.name, stat.st_size, stat.st_mtime, path)

    def remove(self, entry):
        entry.handle.unlink(missing_ok=True)

    def check(self, *, create=False):
        """Write, read and remove a probe file; returns what was checked."""
        with storage_errors("checking the blob store"):
            self.root.mkdir(parents=True, exist_ok=True)
            tmp, sink = _incoming(self.root)
            with sink:
                sink.write(b"probe")
            try:
                if Path(tmp).read_bytes() != b"probe":
                    raise BlobIntegrityError(f"{tmp} did not read back as written")
            finally:
                os.unlink(tmp)
        return f"{self.describe()}: writable"


# --- An S3-compatible object store ------------------------------------------------------


class _ObjectReader(io.RawIOBase):
    """A seekable, read-only view of one stored object.

    Reading streams the object's body from the current position (one GET, read as it is
    consumed); seeking only moves the position, and the next read asks for a range from there.
    """

    def __init__(self, client, bucket, key, size):
        super().__init__()
        self._client, self._bucket, self._key = client, bucket, key
        self.size = size
        self._position = 0
        self._body = None

    def readable(self):
        return True

    def seekable(self):
        return True

    def tell(self):
        return self._position

    def seek(self, offset, whence=io.SEEK_SET):
        if whence == io.SEEK_SET:
            position = offset
        elif whence == io.SEEK_CUR:
            position = self._position + offset
        elif whence == io.SEEK_END:
            position = self.size + offset
        else:
            raise ValueError(f"invalid whence {whence!r}")
        if position < 0:
            raise OSError(errno.EINVAL, "negative seek position")
        if position != self._position:
            self._drop_body()
            self._position = position
        return position

    def _drop_body(self):
        if self._body is not None:
            self._body.close()
            self._body = None

    def readinto(self, buffer):
        if self._position >= self.size or len(buffer) == 0:
            return 0
        if self._body is None:
            reply = self._client.get_object(Bucket=self._bucket, Key=self._key,
                                            Range=f"bytes={self._position}-")
            self._body = reply["Body"]
        data = self._body.read(min(len(buffer), self.size - self._position))
        if not data:
            raise OSError(errno.EIO, f"the object store ended {self._key} at byte "
                                     f"{self._position} of {self.size}")
        buffer[:len(data)] = data
        self._position += len(data)
        return len(data)

    def close(self):
        self._drop_body()
        super().close()


def _error_code(exc):
    response = getattr(exc, "response", None) or {}
    return (str(response.get("Error", {}).get("Code", "")),
            response.get("ResponseMetadata", {}).get("HTTPStatusCode"))


def _is_missing(exc):
    code, status = _error_code(exc)
    return code in ("404", "NoSuchKey", "NotFound") or status == 404


@contextlib.contextmanager
def _store_errors(what):
    """Turn an object store's 'no room left' answer into StorageFull; other errors pass."""
    from botocore.exceptions import ClientError

    try:
        yield
    except ClientError as exc:
        code, status = _error_code(exc)
        if code in FULL_CODES or status == 507:
            raise StorageFull(what, f"the object store answered {code or status}") from exc
        raise


class S3Store:
    kind = "s3"

    def __init__(self, *, endpoint_url, bucket, prefix, region, access_key_id,
                 secret_access_key, part_bytes):
        import boto3
        from botocore.config import Config

        self.endpoint_url = endpoint_url
        self.bucket = bucket
        self.prefix = prefix
        self.part_bytes = part_bytes
        self.client = boto3.session.Session().client(
            "s3", endpoint_url=endpoint_url, region_name=region,
            aws_access_key_id=access_key_id, aws_secret_access_key=secret_access_key,
            # Checksums: each request carries Content-MD5 (which every S3-compatible store
            # checks); the client's newer checksum headers are sent only where required, as
            # not every store understands them.
            config=Config(s3={"addressing_style": "path"}, signature_version="s3v4",
                          retries={"max_attempts": 5, "mode": "standard"},
                          request_checksum_calculation="when_required",
                          response_checksum_validation="when_required",
                          max_pool_connections=16))

    def describe(self):
        return f"bucket {self.bucket} at {self.endpoint_url or 'the default endpoint'}"

    def key(self, sha256):
        return self.prefix + blob_name(sha256)

    def _size(self, key):
        """The object's size, or None when there is no such object."""
        from botocore.exceptions import ClientError

        try:
            return self.client.head_object(Bucket=self.bucket, Key=key)["ContentLength"]
        except ClientError as exc:
            if _is_missing(exc):
                return None
            raise

    def exists(self, sha256):
        return self._size(self.key(sha256)) is not None

    # writing

    def _incoming_key(self):
        return f"{self.prefix}{INCOMING}{int(time.time())}-{secrets.token_hex(8)}"

    def _upload(self, key, pending, stream, *, expected=None):
        """Send the bytes in ``pending`` (a list holding what was already read, emptied
        here) and then the rest of ``stream`` to ``key``, hashing what is sent.

        One PUT when everything fits in one part, else a multipart upload. With ``expected``
        (the sha256 the bytes must have) nothing is stored unless the hash matches: the PUT
        is not sent, the multipart upload is aborted instead of completed. Returns (sha256,
        bytes sent).
        """
        digest = hashlib.sha256()
        data = pending.pop() if pending else b""
        if len(data) < self.part_bytes:
            data += _read_up_to(stream, self.part_bytes - len(data))
        if len(data) < self.part_bytes:
            digest.update(data)
            _check(digest, expected, key)
            self.client.put_object(Bucket=self.bucket, Key=key, Body=data,
                                   ContentMD5=_md5(data))
            return digest.hexdigest(), len(data)
        upload_id = self.client.create_multipart_upload(Bucket=self.bucket, Key=key)["UploadId"]
        try:
            parts, size = [], 0
            while data:
                digest.update(data)
                size += len(data)
                reply = self.client.upload_part(Bucket=self.bucket, Key=key, UploadId=upload_id,
                                                PartNumber=len(parts) + 1, Body=data,
                                                ContentMD5=_md5(data))
                parts.append({"ETag": reply["ETag"], "PartNumber": len(parts) + 1})
                data = None  # let the part go before reading the next one
                data = _read_up_to(stream, self.part_bytes)
            _check(digest, expected, key)
            self.client.complete_multipart_upload(Bucket=self.bucket, Key=key,
                                                  UploadId=upload_id,
                                                  MultipartUpload={"Parts": parts})
        except BaseException:
            with contextlib.suppress(Exception):
                self.client.abort_multipart_upload(Bucket=self.bucket, Key=key,
                                                   UploadId=upload_id)
            raise
        return digest.hexdigest(), size

    def _delete(self, key):
        with contextlib.suppress(Exception):
            self.client.delete_object(Bucket=self.bucket, Key=key)

    def put_stream(self, stream):
        with _store_errors("writing a file into the blob store"):
            pending = [_read_up_to(stream, self.part_bytes)]
            if len(pending[0]) < self.part_bytes:  # small: its name is known before sending
                data = pending.pop()
                sha256 = hashlib.sha256(data).hexdigest()
                if not self.exists(sha256):
                    self._upload(self.key(sha256), [data], stream, expected=sha256)
                return sha256, len(data)
            # Large: stream it to a temporary key while hashing, then give it its name.
            temporary = self._incoming_key()
            try:
                sha256, size = self._upload(temporary, pending, stream)
                target = self.key(sha256)
                if self._size(target) is None:
                    from boto3.s3.transfer import TransferConfig

                    self.client.copy({"Bucket": self.bucket, "Key": temporary}, self.bucket,
                                     target, Config=TransferConfig(
                                         multipart_threshold=self.part_bytes,
                                         multipart_chunksize=self.part_bytes,
                                         use_threads=False))
                    if self._size(target) != size:
                        self._delete(target)
                        raise BlobIntegrityError(f"the copy of {temporary} to {target} does "
                                                 f"not have the {size} bytes sent")
            finally:
                self._delete(temporary)
        return sha256, size

    def adopt_file(self, path, sha256=None):
        if sha256 is None:
            with open(path, "rb") as stream:
                sha256, size = hash_stream(stream)
        else:  # the upload below checks the bytes sent against it
            size = path.stat().st_size
        if not self.exists(sha256):
            with _store_errors("writing a file into the blob store"), open(path, "rb") as stream:
                self._upload(self.key(sha256), [], stream, expected=sha256)
        path.unlink()
        return sha256, size

    # reading

    def open(self, sha256):
        key = self.key(sha256)
        size = self._size(key)
        if size is None:
            raise FileNotFoundError(errno.ENOENT, f"no blob {sha256} in {self.describe()}")
        return io.BufferedReader(_ObjectReader(self.client, self.bucket, key, size),
                                 buffer_size=CHUNK_BYTES)

    def copy_to(self, sha256, destination):
        """Download to ``destination`` (via a temporary name), checking the sha256."""
        partial = destination.with_name(f".{destination.name}.partial-{secrets.token_hex(4)}")
        try:
            with self.open(sha256) as source, open(partial, "wb") as sink:
                found, _ = hash_stream(source, sink)
            if found != sha256:
                raise BlobIntegrityError(f"blob {sha256} in {self.describe()} reads as {found}")
            os.replace(partial, destination)
        finally:
            partial.unlink(missing_ok=True)

    # listing, for collect

    def _objects(self, prefix):
        pages = self.client.get_paginator("list_objects_v2").paginate(
            Bucket=self.bucket, Prefix=prefix)
        for page in pages:
            yield from page.get("Contents", [])

    def blobs(self):
        for item in self._objects(self.prefix):
            name = item["Key"][len(self.prefix):]
            match = BLOB_NAME.match(name)
            if match:
                yield Entry(match.group(3), item["Size"], item["LastModified"].timestamp(),
                            ("object", item["Key"]))

    def unfinished(self):
        """Temporary objects of writes that stopped, and multipart uploads never completed.

        An entry's time is the later of the store's own and the one in its name (when its
        write started), so a store that reports odd times cannot make a live write look old.
        """
        for item in self._objects(self.prefix + INCOMING):
            name = item["Key"][len(self.prefix):]
            yield Entry(name, item["Size"], _started(name, item["LastModified"].timestamp()),
                        ("object", item["Key"]))
        pages = self.client.get_paginator("list_multipart_uploads").paginate(
            Bucket=self.bucket, Prefix=self.prefix)
        for page in pages:
            for upload in page.get("Uploads", []):
                name = upload["Key"][len(self.prefix):]
                parts = self.client.list_parts(Bucket=self.bucket, Key=upload["Key"],
                                               UploadId=upload["UploadId"]).get("Parts", [])
                yield Entry(f"{name} (unfinished upload)", sum(p["Size"] for p in parts),
                            _started(name, upload["Initiated"].timestamp()),
                            ("upload", upload["Key"], upload["UploadId"]))

    def remove(self, entry):
        if entry.handle[0] == "object":
            self.client.delete_object(Bucket=self.bucket, Key=entry.handle[1])
        else:
            from botocore.exceptions import ClientError

            try:
                self.client.abort_multipart_upload(Bucket=self.bucket, Key=entry.handle[1],
                                                   UploadId=entry.handle[2])
            except ClientError as exc:
                if _error_code(exc)[0] != "NoSuchUpload":
                    raise

    def check(self, *, create=False):
        """Reach the bucket (making it with ``create``), then write, read and remove a probe
        object under incoming/; returns what was checked. Raises BlobStoreError otherwise."""
        from botocore.exceptions import BotoCoreError, ClientError

        made = False
        try:
            try:
                self.client.head_bucket(Bucket=self.bucket)
            except ClientError as exc:
                if not (create and _is_missing(exc)):
                    raise
                self.client.create_bucket(Bucket=self.bucket)
                made = True
            key = self._incoming_key()
            self.client.put_object(Bucket=self.bucket, Key=key, Body=b"probe",
                                   ContentMD5=_md5(b"probe"))
            try:
                body = self.client.get_object(Bucket=self.bucket, Key=key)["Body"].read()
            finally:
                self.client.delete_object(Bucket=self.bucket, Key=key)
        except (ClientError, BotoCoreError) as exc:
            code, status = _error_code(exc)
            hint = ("the bucket does not exist: make it, or run check_blob_store "
                    "--create-bucket" if _is_missing(exc) else
                    "check CAIRN_S3_ACCESS_KEY_ID and CAIRN_S3_SECRET_ACCESS_KEY"
                    if status in (401, 403) else "check CAIRN_S3_ENDPOINT_URL and the network")
            raise BlobStoreError(f"cannot use {self.describe()}: {exc}; {hint}") from exc
        if body != b"probe":
            raise BlobIntegrityError(f"{key} in {self.describe()} did not read back as written")
        return f"{self.describe()}{' (bucket made)' if made else ''}: writable, prefix " \
               f"{self.prefix!r}"


def _md5(data):
    """Content-MD5 of a request body: the store refuses the request if the body differs."""
    return base64.b64encode(hashlib.md5(data, usedforsecurity=False).digest()).decode()


def _check(digest, expected, key):
    if expected is not None and digest.hexdigest() != expected:
        raise BlobIntegrityError(f"refused to store {key}: the bytes read hash to "
                                 f"{digest.hexdigest()}, not {expected} (the file changed while "
                                 "it was stored); nothing was kept")


def _started(name, reported):
    """The later of a store's time for an entry and the start time in its name, if any."""
    match = INCOMING_NAME.match(name)
    return max(reported, float(match.group(1))) if match else reported


def _read_up_to(stream, size):
    """Up to ``size`` bytes of a stream (fewer only at its end)."""
    pieces, got = [], 0
    while got < size:
        piece = stream.read(min(CHUNK_BYTES, size - got))
        if not piece:
            break
        pieces.append(piece)
        got += len(piece)
    return pieces[0] if len(pieces) == 1 else b"".join(pieces)


# --- The store in use -----------------------------------------------------------------------

_stores = {}
_stores_lock = threading.Lock()


def store():
    """The store the settings name. An object-store client is made once per process."""
    if settings.BLOB_STORE != "s3":
        return LocalStore(settings.BLOB_ROOT)
    config = dict(endpoint_url=settings.S3_ENDPOINT_URL, bucket=settings.S3_BUCKET,
                  prefix=settings.S3_PREFIX, region=settings.S3_REGION,
                  access_key_id=settings.S3_ACCESS_KEY_ID,
                  secret_access_key=settings.S3_SECRET_ACCESS_KEY,
                  part_bytes=settings.S3_PART_BYTES)
    key = (os.getpid(), *config.values())
    with _stores_lock:
        if key not in _stores:
            if len(_stores) >= 8:  # settings changed many times (tests): forget old clients
                _stores.clear()
            _stores[key] = S3Store(**config)
        return _stores[key]


def check_store(*, create=False):
    """Check the configured store can be written and read (``check_blob_store``)."""
    return store().check(create=create)


def put_stream(stream):
    """Store a stream as a blob; returns (sha256, size). The same content is stored once."""
    return store().put_stream(stream)


def put_bytes(data):
    """Store bytes as a blob; returns (sha256, size)."""
    return put_stream(io.BytesIO(data))


def adopt_file(path, sha256=None):
    """Store a file that may be consumed (a freshly unpacked upload): in the local store it is
    moved, not copied, when it lies on the same disk; it is gone afterwards. Returns
    (sha256, size).

    ``sha256``: the file's digest when the caller already has it (hashed as it was written,
    e.g. by ``extract_archive(digests=...)``, and unchanged since), which saves reading the
    file again. The local store then renames it unread; a copy to another disk or an upload to
    the object store checks the bytes against it and stores nothing on a mismatch.
    """
    return store().adopt_file(Path(path), None if sha256 is None else check_sha256(sha256))


def blob_exists(sha256):
    return store().exists(check_sha256(sha256))


def open_blob(sha256):
    """A blob opened for reading (binary, seekable); FileNotFoundError when there is none."""
    return store().open(check_sha256(sha256))


def read_blob(sha256):
    with open_blob(sha256) as fh:
        return fh.read()


def copy_blob_to(sha256, destination):
    """Write a blob to a local file (for code that needs a path, e.g. mne's readers)."""
    destination = Path(destination)
    destination.parent.mkdir(parents=True, exist_ok=True)
    store().copy_to(check_sha256(sha256), destination)
