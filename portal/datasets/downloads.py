"""Streaming a whole dataset version as a zip, without building it in memory or on disk."""

import zipfile

from portal.datasets import blobs

ZIP64_FROM_BYTES = 2**31


class _Pipe:
    """A write-only sink whose contents the generator hands out piece by piece."""

    def __init__(self):
        self.parts = []
        self.position = 0

    def write(self, data):
        self.parts.append(bytes(data))
        self.position += len(data)
        return len(data)

    def tell(self):
        return self.position

    def flush(self):
        return None

    def take(self):
        data = b"".join(self.parts)
        self.parts = []
        return data


def stream_version_zip(files, *, folder):
    """Yield the bytes of a zip of ``files`` ((path, sha256, bytes) rows) under ``folder``/."""
    pipe = _Pipe()
    with zipfile.ZipFile(pipe, mode="w", compression=zipfile.ZIP_STORED) as archive:
        for path, sha256, size in files:
            info = zipfile.ZipInfo(f"{folder}/{path}", date_time=(1980, 1, 1, 0, 0, 0))
            info.file_size = size
            with blobs.open_blob(sha256) as source, archive.open(
                    info, "w", force_zip64=size >= ZIP64_FROM_BYTES) as target:
                while chunk := source.read(blobs.CHUNK_BYTES):
                    target.write(chunk)
                    yield pipe.take()
            yield pipe.take()
    yield pipe.take()
