"""A real S3-compatible server for the blob store's tests: moto's standalone server, run as its
own process on a free loopback port once per test session (requirements-test.txt pins it).

Tests reach it over HTTP with the same client the portal uses, so requests, multipart uploads,
ranges and listings go through a real server, not an object patched in-process.
"""

import os
import secrets
import socket
import subprocess
import sys
import time

import pytest

from tests.helpers import skip_or_fail

ACCESS_KEY = "cairn-test"
SECRET_KEY = "cairn-test-secret"
REGION = "us-east-1"
#: The smallest part size the protocol allows; tests write blobs several parts long.
PART_BYTES = 5 * 1024 * 1024


def free_port():
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


class ObjectStoreServer:
    def __init__(self, log_path):
        self.port = free_port()
        self.endpoint_url = f"http://127.0.0.1:{self.port}"
        self.log = open(log_path, "ab")
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "moto.server", "-H", "127.0.0.1", "-p", str(self.port)],
            stdout=self.log, stderr=subprocess.STDOUT,
            env=dict(os.environ, AWS_ACCESS_KEY_ID=ACCESS_KEY,
                     AWS_SECRET_ACCESS_KEY=SECRET_KEY))
        self.log_path = log_path

    def client(self):
        import boto3
        from botocore.config import Config

        return boto3.session.Session().client(
            "s3", endpoint_url=self.endpoint_url, region_name=REGION,
            aws_access_key_id=ACCESS_KEY, aws_secret_access_key=SECRET_KEY,
            config=Config(s3={"addressing_style": "path"}))

    def wait_ready(self, timeout_s=60):
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"the object store server exited ({self.proc.returncode}); "
                                   f"see {self.log_path}")
            try:
                with socket.create_connection(("127.0.0.1", self.port), timeout=1):
                    pass
                self.client().list_buckets()
                return
            except Exception:  # not listening yet
                time.sleep(0.2)
        raise RuntimeError(f"the object store server did not answer within {timeout_s} s")

    def new_bucket(self):
        name = f"cairn-{secrets.token_hex(6)}"
        self.client().create_bucket(Bucket=name)
        return name

    def stop(self):
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(timeout=10)
        self.log.close()


@pytest.fixture(scope="session")
def object_store_server(tmp_path_factory):
    try:
        import moto.server  # noqa: F401
    except ImportError:
        skip_or_fail("needs moto's S3 server: pip install -r requirements-test.txt")
    server = ObjectStoreServer(tmp_path_factory.mktemp("object-store") / "server.log")
    try:
        server.wait_ready()
        yield server
    finally:
        server.stop()


def use_object_store(settings, server, prefix="blobs/"):
    """Point the portal's settings at a new bucket of ``server``; returns the bucket."""
    bucket = server.new_bucket()
    settings.BLOB_STORE = "s3"
    settings.S3_ENDPOINT_URL = server.endpoint_url
    settings.S3_BUCKET = bucket
    settings.S3_PREFIX = prefix
    settings.S3_REGION = REGION
    settings.S3_ACCESS_KEY_ID = ACCESS_KEY
    settings.S3_SECRET_ACCESS_KEY = SECRET_KEY
    settings.S3_PART_BYTES = PART_BYTES
    return bucket


def store_env(server, bucket, prefix="blobs/"):
    """The environment variables that point a separate process at the same bucket."""
    return {"CAIRN_BLOB_STORE": "s3", "CAIRN_S3_ENDPOINT_URL": server.endpoint_url,
            "CAIRN_S3_BUCKET": bucket, "CAIRN_S3_PREFIX": prefix, "CAIRN_S3_REGION": REGION,
            "CAIRN_S3_ACCESS_KEY_ID": ACCESS_KEY, "CAIRN_S3_SECRET_ACCESS_KEY": SECRET_KEY,
            "CAIRN_S3_PART_MB": str(PART_BYTES / 1024**2)}
