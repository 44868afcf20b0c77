"""Shared fixtures: people and sites for permission tests, and the small demo consortium.

tests/unit loads this file too and runs without Django (``make unit`` switches pytest-django
off; a fresh-venv test has no Django at all): import Django and the portal only inside the
fixtures that need them (tests/unit/test_import_rules.py checks it).
"""

from pathlib import Path

import pytest

from tests.helpers import PYEDFLIB_MEAS_DATE

# Password hashing in tests: Django's default PBKDF2 costs about 0.3 s per hash on our 2-core
# machines, paid for every account a fixture makes and every password log-in; MD5 is the
# hasher Django's testing documentation suggests for speed. PBKDF2 stays second so a hash
# made before this fixture ran still verifies. The portal itself keeps Django's default.
FAST_PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher",
                         "django.contrib.auth.hashers.PBKDF2PasswordHasher"]


@pytest.fixture(scope="session", autouse=True)
def _fast_password_hashing(request):
    """Session-wide, so accounts made by session and module fixtures are cheap too."""
    if not request.config.pluginmanager.hasplugin("django"):
        yield
        return
    from django.test.utils import override_settings

    fast = override_settings(PASSWORD_HASHERS=FAST_PASSWORD_HASHERS)  # clears hasher caches
    fast.enable()
    yield
    fast.disable()


@pytest.fixture(autouse=True)
def _test_settings(request):
    """The test client speaks plain HTTP; in-process tests never wait on a heartbeat
    (integration tests give their workers their own timing). Skipped without pytest-django,
    so the pure science tests also run with ``-p no:django``."""
    if not request.config.pluginmanager.hasplugin("django"):
        return
    settings = request.getfixturevalue("settings")
    settings.SECURE_SSL_REDIRECT = False
    settings.SESSION_COOKIE_SECURE = False
    settings.CSRF_COOKIE_SECURE = False
    settings.JOB_HEARTBEAT_S = 3600
    scratch = request.getfixturevalue("tmp_path")
    settings.BLOB_ROOT = scratch / "blobs"
    settings.STAGING_ROOT = scratch / "staging"
    settings.VAR_DIR = scratch


@pytest.fixture(scope="session")
def demo_small(tmp_path_factory):
    """The demo consortium at its small scale, generated once per test session."""
    from fixtures.demo import generate

    return generate(tmp_path_factory.mktemp("demo-small"), scale="small", seed=7)


@pytest.fixture(scope="session")
def pyedflib_bids(tmp_path_factory):
    """pyedflib's shipped ``test_generator.edf`` (11 signals, 200 Hz, 600 s) written by
    mne-bids as sub-01's only recording of a BIDS tree; (root, data file's relative path)."""
    pyedflib = pytest.importorskip("pyedflib")
    import mne
    import mne_bids

    source = Path(pyedflib.__file__).parent / "data" / "test_generator.edf"
    root = tmp_path_factory.mktemp("pyedflib") / "bids"
    raw = mne.io.read_raw_edf(source, verbose="ERROR")
    raw.set_meas_date(PYEDFLIB_MEAS_DATE)
    path = mne_bids.BIDSPath(root=root, subject="01", task="generator", datatype="eeg",
                             suffix="eeg", extension=".edf")
    mne_bids.write_raw_bids(raw, path, format="EDF", allow_preload=True, overwrite=True,
                            verbose="ERROR")
    return root, path.fpath.relative_to(root).as_posix()


@pytest.fixture
def consortium(db):
    """Two studies; study A has sites a1 and a2, study B has site b1; one person per role."""
    from portal.accounts.setup import add_site, add_study
    from tests.helpers import member

    add_study("study-a", name="Study A")
    add_study("study-b", name="Study B")
    a1, _ = add_site("a1", study_slug="study-a", name="Site A1")
    a2, _ = add_site("a2", study_slug="study-a", name="Site A2")
    b1, _ = add_site("b1", study_slug="study-b", name="Site B1")
    people = {}
    for username, role, site in [
        ("dm_a1", "data_manager", "a1"), ("dm_a2", "data_manager", "a2"),
        ("analyst_a1", "analyst", "a1"), ("lead_a", "study_lead", "a1"),
        ("auditor_a", "auditor", "a2"), ("dm_b1", "data_manager", "b1"),
        ("lead_b", "study_lead", "b1"),
    ]:
        people[username], _ = member(username, role=role, site_slug=site)
    people["operator"], _ = member("operator", role="operator")
    return {"sites": {"a1": a1, "a2": a2, "b1": b1}, "people": people}


@pytest.fixture(autouse=True)
def _audit_truncate_for_flush(request):
    """Transactional tests end with a TRUNCATE of every table, which the audit table's
    trigger refuses on PostgreSQL. Lift only that trigger for the flush, and put it back
    before the next test."""
    marker = request.node.get_closest_marker("django_db")
    if marker is None or not marker.kwargs.get("transaction"):
        yield
        return
    request.getfixturevalue("transactional_db")
    from django.db import connection

    if connection.vendor != "postgresql":
        yield
        return
    tables = (("audit_event", "audit_event_no_truncate"),
              ("audit_chainlink", "audit_chainlink_no_truncate"))
    with connection.cursor() as cursor:
        for table, trigger in tables:
            cursor.execute(f"ALTER TABLE {table} ENABLE TRIGGER {trigger}")
    yield
    with connection.cursor() as cursor:  # the flush after this test truncates every table
        for table, trigger in tables:
            cursor.execute(f"ALTER TABLE {table} DISABLE TRIGGER {trigger}")
