"""Two worker processes that share only the object store (and the database and broker), as
workers on two machines would: one validates an upload, the other runs the quality checks of
the version it made, reading the recordings from the store. Each has its own CAIRN_VAR_DIR,
blob folder and staging folder; the store is moto's S3 server as a process on the loopback
address (tests/object_store.py)."""

import os
import shutil

import pytest
from django.conf import settings as django_settings
from django.db import connection

from portal.accounts.setup import add_site, add_study
from portal.datasets import blobs
from portal.datasets.models import FINAL_UPLOAD_STATES, Upload
from portal.datasets.services import submit_path
from portal.jobs.models import Job, JobState
from portal.quality.models import QCRound, Verdict
from portal.quality.services import runs_of, start_round
from tests.helpers import member, skip_or_fail
from tests.integration.conftest import wait_for
from tests.object_store import object_store_server, store_env, use_object_store  # noqa: F401

pytestmark = [pytest.mark.integration, pytest.mark.django_db(transaction=True)]


@pytest.fixture
def shared_store(request, settings):
    """The environment of a worker that reaches this test's database, broker and bucket."""
    if connection.vendor != "postgresql":
        skip_or_fail("needs PostgreSQL: set DATABASE_URL=postgres://…")
    if not settings.CELERY_BROKER_URL.startswith("redis://"):
        skip_or_fail("needs Redis: set CELERY_BROKER_URL=redis://…")
    import redis

    server = request.getfixturevalue("object_store_server")
    bucket = use_object_store(settings, server)
    broker = redis.Redis.from_url(settings.CELERY_BROKER_URL)
    broker.flushdb()
    db = connection.settings_dict
    env = dict(os.environ)
    env.update({
        "DATABASE_URL": f"postgres://{db['USER'] or 'postgres'}@{db['HOST'] or '127.0.0.1'}:"
                        f"{db['PORT'] or 5432}/{db['NAME']}",
        "CELERY_BROKER_URL": settings.CELERY_BROKER_URL,
        "CAIRN_EMBEDDED": "true",
        **store_env(server, bucket),
    })
    yield env
    broker.flushdb()


def own_folders(env, root, *, staging=None):
    """``env`` with a var, blob and staging folder of the worker's own under ``root``."""
    root.mkdir(parents=True)
    return dict(env, CAIRN_VAR_DIR=str(root), CAIRN_BLOB_ROOT=str(root / "blobs"),
                CAIRN_STAGING_ROOT=str(staging or root / "staging"))


def files_under(folder):
    return [p for p in folder.rglob("*") if p.is_file()] if folder.exists() else []


def test_upload_validated_by_one_worker_is_checked_by_another(shared_store, start_worker,
                                                              demo_small, tmp_path):
    info = demo_small.sites[0]
    source = tmp_path / "source" / info.slug
    shutil.copytree(info.bids_root, source)
    study, _ = add_study("rail", name="Rail")
    site, _ = add_site(info.slug, study_slug="rail", name=info.name)
    manager, _ = member("dm", role="data_manager", site_slug=info.slug)
    # The first worker stands beside the web server: it reads the staged archive.
    first_env = own_folders(shared_store, tmp_path / "machine-a",
                            staging=django_settings.STAGING_ROOT)
    second_env = own_folders(shared_store, tmp_path / "machine-b")

    upload = submit_path(source, site=site, study=study, user=manager)
    # The first takes only the intake queue: the accepted version asks for its checks at once,
    # and those must wait for the second worker (a worker serving every queue took some).
    first = start_worker(first_env, name="a", queues="intake")
    try:
        wait_for(lambda: Upload.objects.get(pk=upload.pk).state in FINAL_UPLOAD_STATES,
                 300, "the first worker to validate the upload")
    except AssertionError as exc:
        raise AssertionError(f"{exc}; the worker said:\n{first.output()[-4000:]}") from None
    first.stop()
    upload.refresh_from_db()
    assert upload.state == "accepted", (upload.errors, first.output()[-3000:])
    version = upload.version
    stored = {entry.name for entry in blobs.store().blobs()}
    assert {f.sha256 for f in version.files.all()} <= stored

    qc_round, _ = start_round(version)
    second = start_worker(second_env, name="b")
    recordings = list(version.recordings.all())

    def checked():
        failed = Job.objects.filter(state=JobState.FAILED).first()
        assert failed is None, (failed.error, second.output()[-3000:])
        return len(runs_of(QCRound.objects.get(pk=qc_round.pk))) == len(recordings)

    wait_for(checked, 600, "the second worker to check every recording")
    second.stop()
    runs = runs_of(qc_round)
    assert all(runs[r.sha256].verdict in Verdict.values for r in recordings)
    # The checks read the recordings themselves: their rate and length are the ones the
    # first worker indexed.
    for recording in recordings:
        result = runs[recording.sha256].result
        assert result["sfreq_hz"] == pytest.approx(recording.sfreq_hz)
        assert result["duration_s"] == pytest.approx(recording.duration_s,
                                                     abs=1 / recording.sfreq_hz)
    # worker_id is host:pid: each step ran in the process meant for it.
    validated = Job.objects.get(kind="upload.validate", target_id=str(upload.pk))
    assert validated.worker_id.endswith(f":{first.proc.pid}")
    checks = Job.objects.filter(kind="qc.recording")
    assert checks.count() == len(recordings) and all(
        job.state == JobState.DONE and job.worker_id.endswith(f":{second.proc.pid}")
        for job in checks)
    # Neither machine kept a blob in its own folder: the second read every recording from
    # the store.
    assert files_under(tmp_path / "machine-a" / "blobs") == []
    assert files_under(tmp_path / "machine-b" / "blobs") == []
