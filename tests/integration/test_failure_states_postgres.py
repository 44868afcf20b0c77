"""Failure states on PostgreSQL (issue 13): a heartbeat whose connection the server cut, a
worker whose database connection drops mid-job, and a slow upload chunk that must not hold
the upload's row lock while its body arrives."""

import os
import threading

import pytest
from django.db import DatabaseError, connection, connections, transaction

from portal.accounts.setup import add_site, add_study
from portal.audit.models import Event
from portal.datasets.models import Upload
from portal.datasets.services import start_chunked, write_chunk
from portal.jobs import runner, services
from portal.jobs.models import Job, JobState
from tests.helpers import member, skip_or_fail
from tests.integration.conftest import wait_for

pytestmark = [pytest.mark.integration, pytest.mark.django_db(transaction=True)]


@pytest.fixture
def postgres():
    if connection.vendor != "postgresql":
        skip_or_fail("needs PostgreSQL: set DATABASE_URL=postgres://…")


def spin_until(renewals, *, count, cap=60_000_000):
    """Pure-Python CPU work (no sleep, no I/O) until the heartbeat renewed ``count`` times."""
    x = i = 0
    while len(renewals) < count and i < cap:
        i += 1
        x = (x * 31 + i) % 1_000_003
    return x


def test_heartbeat_recovers_after_the_server_cut_its_connection(postgres, settings, monkeypatch):
    """The server ends the heartbeat's session (as a restart, a failover or an idle timeout
    does) while a long pure-Python step runs: the lease must still be renewed afterwards."""
    settings.JOB_HEARTBEAT_S = 0.05
    monkeypatch.setattr(services, "send", lambda job_id: True)
    renewals, cut, after_cut = [], [], []
    real = services.heartbeat

    def counting(job_id, token):
        held = real(job_id, token)
        if held:
            renewals.append(1)
        return held

    def long_step(ctx):
        spin_until(renewals, count=2)
        with connection.cursor() as cursor:  # every other session of this database: the beat's
            cursor.execute("SELECT pg_terminate_backend(pid) FROM pg_stat_activity "
                           "WHERE datname = current_database() AND pid <> pg_backend_pid()")
            cut.extend(row[0] for row in cursor.fetchall())
        before = len(renewals)
        spin_until(renewals, count=before + 3)
        after_cut.append(len(renewals) - before)
        with ctx.finish():
            pass

    monkeypatch.setattr(services, "heartbeat", counting)
    monkeypatch.setattr(runner, "load_handler", lambda kind: long_step)
    job = services.enqueue("probe")
    assert runner.run(job.pk) == "done"
    assert cut == [True], "the heartbeat's session was not found"
    assert after_cut[0] >= 3, "no renewal after the connection was cut"


class SlowBody:
    def __init__(self, data, on_read):
        self.data, self.position, self.on_read = data, 0, on_read

    def read(self, n):
        self.on_read()
        piece = self.data[self.position:self.position + min(n, 4096)]
        self.position += len(piece)
        return piece


def test_slow_chunk_leaves_the_upload_row_unlocked_while_it_arrives(postgres):
    study, _ = add_study("rail", name="Rail")
    site, _ = add_site("north", study_slug="rail", name="North")
    user, _ = member("dm", role="data_manager", site_slug="north")
    data = b"\7" * 20_000
    upload = start_chunked(site=site, study=study, user=user, mode="snapshot", label="a.tar",
                           expected_bytes=len(data))
    attempts = []

    def lock_from_another_session():
        try:
            with transaction.atomic():
                Upload.objects.select_for_update(nowait=True).get(pk=upload.pk)
            attempts.append("locked it")
        except DatabaseError as exc:
            attempts.append(f"refused: {exc}")
        finally:
            connections.close_all()

    def on_read():
        other = threading.Thread(target=lock_from_another_session)
        other.start()
        other.join()

    write_chunk(upload.pk, offset=0, length=len(data), stream=SlowBody(data, on_read))
    assert attempts and set(attempts) == {"locked it"}, attempts[:1]
    upload.refresh_from_db()
    assert upload.received == [[0, len(data)]]


def cut_other_sessions():
    """End every other session of this database (the worker's), as a restart would."""
    with connection.cursor() as cursor:
        cursor.execute("SELECT pg_terminate_backend(pid) FROM pg_stat_activity "
                       "WHERE datname = current_database() AND pid <> pg_backend_pid()")
        return len(cursor.fetchall())


def test_worker_whose_database_connection_drops_retries_without_losing_an_attempt(
        postgres, settings, start_worker):
    """A real Celery worker (Redis broker): its sessions are cut mid-job; the job is retried
    after a pause, counted as a transient retry, and finishes on its first attempt."""
    if not settings.CELERY_BROKER_URL.startswith("redis://"):
        skip_or_fail("needs Redis: set CELERY_BROKER_URL=redis://…")
    import redis

    redis.Redis.from_url(settings.CELERY_BROKER_URL).flushdb()
    db = connection.settings_dict
    env = dict(os.environ, CAIRN_EMBEDDED="true", CAIRN_JOB_LEASE_S="30",
               CAIRN_JOB_HEARTBEAT_S="0.5", CELERY_BROKER_URL=settings.CELERY_BROKER_URL,
               DATABASE_URL=f"postgres://{db['USER'] or 'postgres'}@{db['HOST'] or '127.0.0.1'}:"
                            f"{db['PORT'] or 5432}/{db['NAME']}")
    with transaction.atomic():
        job = services.enqueue("probe", params={"steps": 12, "step_s": 0.3})
    start_worker(env)

    def progress():
        job.refresh_from_db()
        return job.progress_done >= 2

    wait_for(progress, 60, "the worker to make progress")
    assert cut_other_sessions() >= 1
    wait_for(lambda: Job.objects.get(pk=job.pk).state == JobState.DONE, 90,
             "the job to finish after the retry")
    job.refresh_from_db()
    assert (job.attempts, job.transient_failures) == (1, 1)
    assert Event.objects.filter(verb="job.retrying", target_id=str(job.pk)).count() == 1
