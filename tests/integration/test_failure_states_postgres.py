"""Failure states on PostgreSQL (issue 13): a heartbeat whose connection the server cut, and
a slow upload chunk that must not hold the upload's row lock while its body arrives."""

import threading

import pytest
from django.db import DatabaseError, connection, connections, transaction

from portal.accounts.setup import add_site, add_study
from portal.datasets.models import Upload
from portal.datasets.services import start_chunked, write_chunk
from portal.jobs import runner, services
from tests.helpers import member, skip_or_fail

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
