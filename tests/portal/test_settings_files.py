"""Settings write no file when they load: the embedded default's folders and secret key are
made when first needed (the key when something first signs, the SQLite folder on the first
connection, the broker folders when Celery first reads its configuration)."""

import json
import os
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]

#: Unset in the child so it takes the embedded default (files under CAIRN_VAR_DIR).
UNSET = ("DATABASE_URL", "CELERY_BROKER_URL", "SECRET_KEY", "CAIRN_STATIC_ROOT",
         "CAIRN_BLOB_ROOT", "CAIRN_STAGING_ROOT", "CAIRN_EMBEDDED", "DEBUG",
         "CAIRN_STATIC_FROM_SOURCE", "CAIRN_BLOB_STORE")

LOAD = """
import json, warnings
import django
from django.conf import settings
django.setup()
values = {n: repr(getattr(settings, n)) for n in dir(settings) if n.isupper() and n != "SECRET_KEY"}
from django.core.handlers.wsgi import WSGIHandler
with warnings.catch_warnings(record=True) as caught:
    WSGIHandler()  # builds the middleware, WhiteNoise's included
print(json.dumps({"settings": len(values), "warnings": [str(w.message) for w in caught]}))
"""

USE = """
import json, os
import django
django.setup()
from django.core import signing
from django.db import connection
from portal.celery import app
token = signing.dumps("x")
connection.ensure_connection()
app.conf.broker_url
from django.conf import settings
print(json.dumps({"key": str(settings.SECRET_KEY), "token": token}))
"""


def _run(code, var_dir):
    env = {k: v for k, v in os.environ.items() if k not in UNSET}
    env.update(CAIRN_VAR_DIR=str(var_dir), DJANGO_SETTINGS_MODULE="portal.settings")
    done = subprocess.run([sys.executable, "-c", code], cwd=REPO, env=env,
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-3000:]
    return json.loads(done.stdout.strip().splitlines()[-1])


def _tree(root):
    return sorted(p.relative_to(root).as_posix() for p in root.rglob("*"))


def test_loading_settings_creates_nothing(tmp_path):
    var_dir = tmp_path / "not-yet" / "var"
    out = _run(LOAD, var_dir)
    assert out["settings"] > 50
    assert _tree(tmp_path) == [], "settings or startup wrote files"
    assert not [w for w in out["warnings"] if "No directory" in w], out["warnings"]


def test_files_are_made_when_first_needed_and_the_key_is_kept(tmp_path):
    var_dir = tmp_path / "not-yet" / "var"
    first = _run(USE, var_dir)
    made = _tree(var_dir)
    for path in ("secret_key", "cairn.sqlite3", "broker/queue", "broker/processed",
                 "broker/control"):
        assert path in made, made
    assert (var_dir / "secret_key").stat().st_mode & 0o777 == 0o600
    assert len(first["key"]) >= 50
    second = _run(USE, var_dir)
    assert second["key"] == first["key"], "a restart must keep the key (sessions survive)"
    assert not [p for p in _tree(var_dir) if p.startswith(".secret_key")], "temporary key left"
