"""Streaming a whole dataset version as a zip, without building it in memory or on disk; the
one download of a version that the web page and the API both answer with."""

import zipfile

from django.http import StreamingHttpResponse

from portal.accounts.permissions import Action, require
from portal.audit.events import record
from portal.datasets import blobs
from portal.datasets.access import visible_version

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


def version_zip(request, version_id):
    """The version as a zip for the requesting person or token: visible by the version's
    (site, study), download allowed there, recorded as a download event."""
    version = visible_version(request.user, version_id)
    require(request.user, Action.DOWNLOAD, site=version.site, study=version.study)
    rows = list(version.files.values_list("path", "sha256", "bytes"))
    folder = f"{version.site.slug}-v{version.number}"
    record("download", actor=request.user, token=getattr(request, "api_token", None),
           site=version.site, study=version.study, target=version,
           summary=f"downloaded all {len(rows)} files of {version}",
           outputs=[{"dataset_version": version.pk, "manifest_sha256": version.manifest_sha256}])
    response = StreamingHttpResponse(stream_version_zip(rows, folder=folder),
                                     content_type="application/zip")
    response["Content-Disposition"] = f'attachment; filename="{folder}.zip"'
    return response
