"""The embedded default's files, made when first needed rather than when settings load:
the secret key (the first time something signs), the SQLite file's folder (the first
connection, portal.embedded.sqlite3) and the filesystem broker's folders (when Celery first
reads its configuration, portal.celery)."""

import functools
import os
import secrets
from pathlib import Path


@functools.cache
def secret_key(path):
    """The key kept in ``path`` (made, readable by its owner only, if missing). Several
    processes may ask at once: the key is written to a file of its own and linked into place,
    so every process reads the one key that won."""
    path = Path(path)
    if not path.exists():
        path.parent.mkdir(parents=True, exist_ok=True)
        fresh = path.with_name(f".{path.name}.{os.getpid()}.{secrets.token_hex(4)}")
        descriptor = os.open(fresh, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
        with os.fdopen(descriptor, "w") as out:
            out.write(secrets.token_urlsafe(64))
        try:
            os.link(fresh, path)
        except FileExistsError:
            pass
        finally:
            fresh.unlink()
    return path.read_text().strip()


def make_broker_folders(transport_options):
    """The folders kombu's filesystem transport reads and writes (it makes none of them but
    the control folder, and that one without its parents)."""
    for key in ("data_folder_in", "data_folder_out", "processed_folder", "control_folder"):
        if transport_options.get(key):
            Path(transport_options[key]).mkdir(parents=True, exist_ok=True)
