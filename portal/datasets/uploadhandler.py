"""A Django upload handler that streams each browser-sent file into staging, hashing it, and
the CSRF check that must pass before it is installed."""

import hashlib
import os

from django.conf import settings
from django.core.files.uploadedfile import UploadedFile
from django.core.files.uploadhandler import FileUploadHandler
from django.http import QueryDict
from django.middleware.csrf import CsrfViewMiddleware
from django.utils.datastructures import MultiValueDict

from portal.datasets.services import new_staging_name, staging_root


class StagedFile(UploadedFile):
    """A file already written to staging; ``staged_path`` and ``sha256`` say where and what."""

    def __init__(self, staged_path, name, size, sha256, content_type):
        super().__init__(file=None, name=name, content_type=content_type, size=size)
        self.staged_path = staged_path
        self.sha256 = sha256

    def close(self):
        return None


class StagingUploadHandler(FileUploadHandler):
    """Writes every file field straight to the staging folder; nothing stays in memory."""

    chunk_size = 1024 * 1024

    def new_file(self, field_name, file_name, content_type, content_length, charset=None,
                 content_type_extra=None):
        super().new_file(field_name, file_name, content_type, content_length, charset,
                         content_type_extra)
        self.path = staging_root() / new_staging_name()
        self.sink = open(self.path, "wb")
        self.digest = hashlib.sha256()
        self.size = 0

    def receive_data_chunk(self, raw_data, start):
        self.sink.write(raw_data)
        self.digest.update(raw_data)
        self.size += len(raw_data)
        return None

    def file_complete(self, file_size):
        self.sink.flush()
        os.fsync(self.sink.fileno())
        self.sink.close()
        return StagedFile(self.path, self.file_name, self.size, self.digest.hexdigest(),
                          self.content_type)

    def upload_interrupted(self):
        if getattr(self, "sink", None) is not None:
            self.sink.close()
            self.path.unlink(missing_ok=True)


#: The query-string field that carries the web form's CSRF token (see ``csrf_refusal``).
CSRF_QUERY_FIELD = "csrf_token"


def csrf_refusal(request):
    """Django's CSRF check, made before a byte of the body is read: the token comes from the
    X-CSRFToken header or the ``csrf_token`` query field, never from the body (reading the body
    would already write the files to staging). Returns None when it passes, else the 403."""
    header = settings.CSRF_HEADER_NAME
    if header not in request.META and request.GET.get(CSRF_QUERY_FIELD):
        request.META[header] = request.GET[CSRF_QUERY_FIELD]
    # An empty form for the check to look at, so that it cannot parse the body.
    request._post, request._files = QueryDict(), MultiValueDict()
    try:
        return CsrfViewMiddleware(lambda _: None).process_view(request, None, (), {})
    finally:
        del request._post, request._files
