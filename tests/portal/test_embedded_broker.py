"""The embedded default's broker writes each message whole before a reader can see it.

Reference: kombu 5's filesystem transport (kombu/transport/filesystem.py), whose reader moves
any ``*.<queue>.msg`` file and parses it; its writer creates that file first and writes after,
so a reader can meet an empty message (a JSONDecodeError that stopped the demo's worker)."""

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from kombu import Connection
from kombu.transport import filesystem
from kombu.transport.virtual import Empty

from portal.embedded.broker import Transport

REPO = Path(__file__).resolve().parents[2]


@pytest.fixture
def folders(tmp_path):
    options = {key: str(tmp_path / key) for key in
               ("data_folder_in", "processed_folder", "control_folder")}
    options["data_folder_out"] = options["data_folder_in"]
    for folder in set(options.values()):
        os.makedirs(folder, exist_ok=True)
    return options


def _channel(transport, options):
    return Connection("filesystem://", transport=transport,
                      transport_options=options).channel()


def test_a_message_is_written_whole_then_read(folders):
    channel = _channel(Transport, folders)
    channel._put("intake", {"body": "x" * 100_000})
    names = os.listdir(folders["data_folder_in"])
    assert len(names) == 1 and names[0].endswith(".intake.msg")
    with open(os.path.join(folders["data_folder_in"], names[0]), "rb") as message:
        assert json.loads(message.read())["body"] == "x" * 100_000
    assert channel._get("intake") == {"body": "x" * 100_000}


def test_a_message_still_being_written_is_not_read(folders):
    """What a reader meets while ours writes (a .partial file) is skipped; what it meets
    while kombu's own writer writes (an empty .msg file) stops it."""
    inbox = Path(folders["data_folder_in"])
    (inbox / "1_a.intake.msg.partial").write_bytes(b"")
    with pytest.raises(Empty):
        _channel(Transport, folders)._get("intake")
    (inbox / "2_b.intake.msg").write_bytes(b"")
    with pytest.raises(json.JSONDecodeError):
        _channel(filesystem.Transport, folders)._get("intake")


def test_the_embedded_default_uses_it(tmp_path):
    """Without CELERY_BROKER_URL the portal's Celery app connects through this transport."""
    script = ("import django, os; os.environ['DJANGO_SETTINGS_MODULE'] = 'portal.settings'; "
              "django.setup(); from portal.celery import app; "
              "print(type(app.connection_for_write().transport).__module__)")
    env = {k: v for k, v in os.environ.items() if k not in ("CELERY_BROKER_URL",
                                                            "DATABASE_URL")}
    env["CAIRN_VAR_DIR"] = str(tmp_path)
    done = subprocess.run([sys.executable, "-c", script], cwd=REPO, env=env,
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.strip().splitlines()[-1] == "portal.embedded.broker"
