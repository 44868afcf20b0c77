"""What code and which scientific libraries produced a result."""

import functools
import os
import subprocess
from importlib import metadata
from pathlib import Path

SCIENCE_PACKAGES = ("mne", "mne-bids", "numpy", "scipy", "scikit-learn", "skops", "pandas")
REPO_DIR = Path(__file__).resolve().parents[2]


def _git(*args):
    try:
        out = subprocess.run(
            ["git", *args], cwd=REPO_DIR, capture_output=True, text=True, timeout=5, check=True
        )
    except (OSError, subprocess.SubprocessError):
        return None
    return out.stdout.strip()


@functools.lru_cache(maxsize=1)
def code_version():
    """The git commit and whether the tree was modified, or ``CAIRN_CODE_VERSION`` if set."""
    pinned = os.environ.get("CAIRN_CODE_VERSION")
    if pinned:
        return {"commit": pinned, "modified": False, "source": "CAIRN_CODE_VERSION"}
    commit = _git("rev-parse", "HEAD")
    if commit is None:
        return {"commit": "unknown", "modified": None, "source": "no git checkout"}
    status = _git("status", "--porcelain", "--untracked-files=no")
    return {"commit": commit, "modified": bool(status), "source": "git"}


@functools.lru_cache(maxsize=1)
def library_versions():
    """Installed versions of the scientific libraries (without importing them)."""
    versions = {}
    for name in SCIENCE_PACKAGES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = None
    return versions
