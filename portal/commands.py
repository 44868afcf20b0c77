"""Small pieces shared by the management commands that read a JSON file and wait for work."""

import json
import time
from pathlib import Path

from django.core.management.base import CommandError


def read_json_object(path, what):
    """The JSON object in ``path``; CommandError naming the file, line and column otherwise."""
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise CommandError(f"{path}: no such file") from None
    except json.JSONDecodeError as exc:
        raise CommandError(f"{path}: not valid JSON (line {exc.lineno}, column "
                           f"{exc.colno}): {exc.msg}") from None
    if not isinstance(data, dict):
        raise CommandError(f"{path}: give a JSON object ({what})")
    return data


def wait_until_settled(status, *, timeout_s, what, poll_s=0.5):
    """Poll ``status()`` → (state, error) until "done" or "failed"; returns the last pair."""
    deadline = time.monotonic() + timeout_s
    state, error = status()
    while state not in ("done", "failed"):
        if time.monotonic() > deadline:
            raise CommandError(f"{what} still {state} after {timeout_s:g} s; is a worker "
                               "running?")
        time.sleep(poll_s)
        state, error = status()
    return state, error
