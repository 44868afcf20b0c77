"""The science installs and its unit tests run without Django: a new virtual environment (no
system site packages) gets ``pip install .`` from a copy of the checkout (pyproject.toml
packages cairn_science only) plus pytest and the test-only packages tests/unit imports, pinned
as in requirements*.txt and taken from the same package index the Makefile's ``pip install``
uses (pip's own configuration). ``import django`` must fail there, and ``pytest tests/unit``
must pass. Slow (a few minutes, mostly pip): run with ``-s`` to see the time of each step.
"""

import os
import re
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

from tests.helpers import examples_location
from tests.real_eeg import real_eeg_location

pytestmark = pytest.mark.venv

REPO = Path(__file__).resolve().parents[2]

#: What tests/unit imports beyond the science's own dependencies (pyproject.toml): the test
#: runner and property tests, reference libraries the science is checked against, readers
#: and writers of the BIDS examples and test files, pybids/bidsschematools that the BIDS
#: validation part loads when it runs (PyTorch, which the recurrent learners load when they
#: fit, comes with the package's "recurrent" extra). Django, pytest-django, celery: never.
#: Everything they pull in is held to the versions requirements*.txt pin (a constraints
#: file), as the portal's environment is.
UNIT_TEST_PACKAGES = (
    "pytest", "hypothesis", "pybids", "bidsschematools", "bids-validator", "edfio", "pybv",
    "pyedflib", "pyprep", "antropy", "mne-features",
)

#: What the copy holds: the package, the tests and their fixtures; portal/, the Makefile,
#: docker-compose.yml and requirements*.txt as plain files that unit tests read (the import
#: rules, the configuration table, the pins), never import. Only tests/unit runs.
COPIED = ("cairn_science", "fixtures", "portal", "tests", "bench", "pyproject.toml", "README.md",
          "Makefile", "docker-compose.yml", "Dockerfile", "requirements.txt",
          "requirements-test.txt", ".ci")


def _pins():
    pins = {}
    for name in ("requirements.txt", "requirements-test.txt"):
        for line in (REPO / name).read_text(encoding="utf-8").splitlines():
            found = re.match(r"^([A-Za-z0-9_.\-]+)(\[[^\]]*\])?==(\S+)", line.strip())
            if found:
                pins[found.group(1).lower().replace("_", "-")] = found.group(3)
    return pins


def _copy(target):
    ignore = shutil.ignore_patterns("__pycache__", "*.pyc", "migrations")
    for name in COPIED:
        source = REPO / name
        if source.is_dir():
            shutil.copytree(source, target / name, ignore=ignore)
        elif source.exists():
            shutil.copy2(source, target / name)


def _run(args, *, cwd, env=None, what):
    started = time.monotonic()
    done = subprocess.run(args, cwd=str(cwd), env=env, capture_output=True, text=True)
    elapsed = time.monotonic() - started
    print(f"{what}: {elapsed:.1f} s (exit {done.returncode})")
    return done


def test_science_installs_and_unit_tests_pass_without_django(tmp_path):
    pins = _pins()
    unpinned = [name for name in UNIT_TEST_PACKAGES if name not in pins]
    assert not unpinned, f"pin these in requirements-test.txt: {unpinned}"
    checkout = tmp_path / "checkout"
    checkout.mkdir()
    _copy(checkout)
    venv = tmp_path / "venv"
    done = _run([sys.executable, "-m", "venv", str(venv)], cwd=tmp_path, what="venv")
    assert done.returncode == 0, done.stderr[-3000:]
    python = str(venv / "bin" / "python")
    clean = {k: v for k, v in os.environ.items()
             if k not in ("PYTHONPATH", "DJANGO_SETTINGS_MODULE", "VIRTUAL_ENV")}

    packages = [f"{name}=={pins[name]}" for name in UNIT_TEST_PACKAGES]
    constraints = tmp_path / "constraints.txt"
    constraints.write_text("".join(f"{name}=={version}\n" for name, version in pins.items()))
    done = _run([python, "-m", "pip", "install", "--quiet", "-c", str(constraints),
                 ".[recurrent]", *packages], cwd=checkout, env=clean,
                what="pip install .[recurrent] and the unit tests' packages")
    assert done.returncode == 0, done.stderr[-3000:]

    probe = ("import importlib.util as u, sys; "
             "print(sorted(m for m in ('django', 'celery', 'pytest_django', 'portal') "
             "if u.find_spec(m)))")
    done = _run([python, "-c", probe], cwd=tmp_path, env=clean, what="find django")
    assert done.returncode == 0, done.stderr[-3000:]
    assert done.stdout.strip() == "[]", f"found in the new venv: {done.stdout}"
    done = _run([python, "-c", "import django"], cwd=tmp_path, env=clean, what="import django")
    assert done.returncode != 0 and "ModuleNotFoundError" in done.stderr
    done = _run([python, "-c", "import cairn_science, sys; print(cairn_science.__file__)"],
                cwd=tmp_path, env=clean, what="import cairn_science")
    assert done.returncode == 0 and str(venv) in done.stdout, done.stdout + done.stderr

    env = {**clean, "NUMBA_CACHE_DIR": str(tmp_path / "numba"),
           "CAIRN_BIDS_EXAMPLES": str(examples_location()),
           "CAIRN_REAL_EEG": str(real_eeg_location())}
    done = _run([python, "-m", "pytest", "-q", "-rfE", "--tb=short", "-p", "no:cacheprovider",
                 "tests/unit"],
                cwd=checkout, env=env, what="pytest tests/unit")
    summary = done.stdout.strip().splitlines()[-1:] or [""]
    print(f"pytest tests/unit in the new venv: {summary[0]}")
    assert done.returncode == 0, (done.stdout[-12000:] + done.stderr[-2000:])
    assert " passed" in summary[0]
