"""Large uploads are streamed: the server's Python heap stays small whatever the size.

Requests go straight into Django's WSGI handler with a request body that is generated as it
is read, so neither the test nor the server ever holds the 200 MB in memory; tracemalloc
(Python's standard library) measures the heap peak while the server handles the request.
"""

import hashlib
import html
import re
import tracemalloc

import pytest
from django.core.handlers.wsgi import WSGIHandler
from django.core.signals import request_finished, request_started
from django.db import close_old_connections
from django.urls import reverse

from portal.accounts.models import ApiToken
from portal.accounts.setup import add_site, add_study
from portal.datasets.models import Upload
from portal.datasets.services import staging_path
from tests.helpers import member

pytestmark = pytest.mark.django_db

SIZE = 200 * 1024 * 1024
HEAP_BOUND = 16 * 1024 * 1024
BLOCK = b"\x00" * (1024 * 1024)


class GeneratedBody:
    """A wsgi.input whose bytes are produced on demand: prefix, ``size`` zero bytes, suffix."""

    def __init__(self, prefix, size, suffix):
        self.parts = [prefix, size, suffix]
        self.length = len(prefix) + size + len(suffix)
        self.position = 0

    def read(self, n=-1):
        if n is None or n < 0:
            raise AssertionError("the server tried to read the whole body at once")
        out = bytearray()
        while len(out) < n and self.position < self.length:
            prefix, size, suffix = self.parts
            pos = self.position
            if pos < len(prefix):
                piece = prefix[pos:pos + n - len(out)]
            elif pos < len(prefix) + size:
                piece = BLOCK[: min(n - len(out), len(prefix) + size - pos, len(BLOCK))]
            else:
                start = pos - len(prefix) - size
                piece = suffix[start:start + n - len(out)]
            out += piece
            self.position += len(piece)
        return bytes(out)

    def readline(self, *args):
        raise AssertionError("not used by Django's parsers")


def call_wsgi(environ):
    status = {}

    def start_response(code, headers, exc_info=None):
        status["code"] = int(code.split()[0])

    request_started.disconnect(close_old_connections)
    request_finished.disconnect(close_old_connections)
    try:
        tracemalloc.start()
        tracemalloc.reset_peak()
        base = tracemalloc.get_traced_memory()[0]
        body = b"".join(WSGIHandler()(environ, start_response))
        peak = tracemalloc.get_traced_memory()[1] - base
    finally:
        tracemalloc.stop()
        request_started.connect(close_old_connections)
        request_finished.connect(close_old_connections)
    return status["code"], body, peak


def environ(method, path, *, body, content_type, headers=None):
    env = {
        "REQUEST_METHOD": method, "PATH_INFO": path.split("?")[0],
        "QUERY_STRING": path.split("?", 1)[1] if "?" in path else "",
        "SERVER_NAME": "testserver", "SERVER_PORT": "80", "HTTP_HOST": "testserver",
        "wsgi.url_scheme": "http", "wsgi.input": body, "wsgi.errors": None,
        "CONTENT_TYPE": content_type, "CONTENT_LENGTH": str(body.length),
        "REMOTE_ADDR": "127.0.0.1",
    }
    env.update(headers or {})
    return env


@pytest.fixture
def manager(db):
    add_study("rail", name="Rail")
    add_site("north", study_slug="rail", name="North")
    user, _ = member("dm", role="data_manager", site_slug="north")
    return user


def zeros_sha256(size):
    digest = hashlib.sha256()
    for _ in range(size // len(BLOCK)):
        digest.update(BLOCK)
    return digest.hexdigest()


def test_web_form_upload_streams_to_staging(client, manager):
    client.force_login(manager)
    page = client.get(reverse("datasets:upload_new", args=["north"]))
    token = page.cookies["csrftoken"].value
    # The form posts to its action URL, which carries the CSRF token checked before the body.
    action = html.unescape(re.search(r'<form id="upload-form"[^>]* action="([^"]+)"',
                                     page.content.decode()).group(1))
    boundary = "cairnboundary7"
    fields = b"".join(
        f'--{boundary}\r\nContent-Disposition: form-data; name="{k}"\r\n\r\n{v}\r\n'.encode()
        for k, v in (("study", "rail"), ("mode", "snapshot"))
    )
    prefix = fields + (f'--{boundary}\r\nContent-Disposition: form-data; name="archive"; '
                       f'filename="big.tar"\r\nContent-Type: application/x-tar\r\n\r\n').encode()
    suffix = f"\r\n--{boundary}--\r\n".encode()
    cookies = f"sessionid={client.cookies['sessionid'].value}; csrftoken={token}"
    code, body, peak = call_wsgi(environ(
        "POST", action, body=GeneratedBody(prefix, SIZE, suffix),
        content_type=f"multipart/form-data; boundary={boundary}",
        headers={"HTTP_COOKIE": cookies, "HTTP_ACCEPT": "application/json"},
    ))
    assert code == 201, body[:500]
    upload = Upload.objects.get()
    assert upload.archive_bytes == SIZE and upload.archive_sha256 == zeros_sha256(SIZE)
    assert staging_path(upload).stat().st_size == SIZE
    print(f"web form: server heap peak +{peak / 2**20:.2f} MB for {SIZE / 2**20:.0f} MB")
    assert peak < HEAP_BOUND, f"server heap grew by {peak / 2**20:.1f} MB for a 200 MB upload"


def test_api_chunk_streams_to_staging(client, manager):
    _, raw = ApiToken.issue(manager, "lab server")
    created = client.post(reverse("api:uploads"), {"site": "north", "study": "rail",
                          "filename": "big.tar", "size": SIZE},
                          content_type="application/json", HTTP_AUTHORIZATION=f"Bearer {raw}")
    upload_id = created.json()["upload"]
    code, body, peak = call_wsgi(environ(
        "PUT", reverse("api:upload_chunk", args=[upload_id]) + "?offset=0",
        body=GeneratedBody(b"", SIZE, b""), content_type="application/octet-stream",
        headers={"HTTP_AUTHORIZATION": f"Bearer {raw}"},
    ))
    assert code == 200, body[:500]
    assert Upload.objects.get(pk=upload_id).received == [[0, SIZE]]
    print(f"API chunk: server heap peak +{peak / 2**20:.2f} MB for {SIZE / 2**20:.0f} MB")
    assert peak < HEAP_BOUND, f"server heap grew by {peak / 2**20:.1f} MB for a 200 MB chunk"
