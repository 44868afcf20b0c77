"""The audit chain: tampering of every kind is found and named, PostgreSQL refuses changes
outright, concurrent writers make one unbroken chain, and long transactions do not hold it.

The tampering is done as an intruder with database rights would: raw SQL with the
append-only triggers switched off.
"""

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from django.core.management import call_command
from django.db import DatabaseError, connection, transaction

from portal.audit.chain import seal_pending, verify, write_anchor
from portal.audit.events import record
from portal.audit.models import ChainLink, Event
from tests.helpers import skip_or_fail

REPO = Path(__file__).resolve().parents[2]


def needs_postgres():
    if connection.vendor != "postgresql":
        skip_or_fail("PostgreSQL is needed for the database triggers and raw tampering")


def events(n):
    made = [record("test.step", summary=f"step {i}", params={"i": i, "share": 0.1 * i})
            for i in range(n)]
    seal_pending()
    return made


def sql(statement, params=()):
    with connection.cursor() as cursor:
        cursor.execute("SET CONSTRAINTS ALL IMMEDIATE")  # no pending checks block ALTER TABLE
        cursor.execute("ALTER TABLE audit_event DISABLE TRIGGER USER")
        cursor.execute("ALTER TABLE audit_chainlink DISABLE TRIGGER USER")
        cursor.execute(statement, params)
        cursor.execute("ALTER TABLE audit_event ENABLE TRIGGER USER")
        cursor.execute("ALTER TABLE audit_chainlink ENABLE TRIGGER USER")


def link_of(event):
    return ChainLink.objects.get(event=event)


@pytest.mark.django_db
def test_a_whole_chain_verifies():
    events(5)
    result = verify()
    assert result.ok and result.links == Event.objects.count() and result.unsealed == 0


@pytest.mark.django_db
@pytest.mark.parametrize("change", [
    ("payload", "UPDATE audit_event SET params = '{\"i\": 99}'::jsonb WHERE id = %s"),
    ("actor", "UPDATE audit_event SET actor_snapshot = '{\"username\": \"someone\"}'::jsonb "
              "WHERE id = %s"),
    ("time", "UPDATE audit_event SET at = at + interval '1 second' WHERE id = %s"),
])
def test_changing_an_event_is_found_at_that_event(change):
    needs_postgres()
    made = events(6)
    victim = made[3]
    sql(change[1], [victim.pk])
    result = verify()
    assert not result.ok and result.problem["kind"] == "changed", change[0]
    assert result.problem["event"] == victim.pk and result.problem["seq"] == link_of(
        victim).seq
    assert result.problem["expected"] != result.problem["found"]


@pytest.mark.django_db
def test_reordering_two_events_is_found():
    needs_postgres()
    made = events(6)
    a, b = link_of(made[2]), link_of(made[3])
    sql("UPDATE audit_chainlink SET seq = -1 WHERE id = %s", [a.pk])
    sql("UPDATE audit_chainlink SET seq = %s WHERE id = %s", [a.seq, b.pk])
    sql("UPDATE audit_chainlink SET seq = %s WHERE id = %s", [b.seq, a.pk])
    result = verify()
    assert not result.ok and result.problem["seq"] == a.seq
    assert result.problem["kind"] in ("relinked", "changed")


@pytest.mark.django_db
def test_deleting_an_event_in_the_middle_is_found():
    needs_postgres()
    made = events(6)
    gone = link_of(made[2])
    sql("DELETE FROM audit_chainlink WHERE id = %s", [gone.pk])
    sql("DELETE FROM audit_event WHERE id = %s", [made[2].pk])
    result = verify()
    assert not result.ok and result.problem["kind"] == "missing"
    assert str(gone.seq) in result.problem["words"]


@pytest.mark.django_db
def test_cutting_off_the_newest_events_is_found_against_the_anchor():
    needs_postgres()
    made = events(6)
    anchor = write_anchor()
    assert anchor["seq"] == ChainLink.objects.order_by("-seq").first().seq
    for event in made[-2:]:
        sql("DELETE FROM audit_chainlink WHERE event_id = %s", [event.pk])
        sql("DELETE FROM audit_event WHERE id = %s", [event.pk])
    result = verify()
    assert not result.ok and result.problem["kind"] == "cut"
    assert str(anchor["seq"]) in result.problem["words"]


@pytest.mark.django_db
def test_the_command_names_the_first_broken_link(capsys):
    needs_postgres()
    made = events(4)
    call_command("verify_audit", "--json")
    assert json.loads(capsys.readouterr().out)["ok"] is True
    sql("UPDATE audit_event SET summary = 'edited' WHERE id = %s", [made[1].pk])
    with pytest.raises(SystemExit) as stop:
        call_command("verify_audit")
    assert stop.value.code == 1
    err = capsys.readouterr().err
    assert f"link {link_of(made[1]).seq}" in err and f"event {made[1].pk}" in err


@pytest.mark.django_db
@pytest.mark.parametrize("statement", [
    "UPDATE audit_event SET summary = 'x'", "DELETE FROM audit_event",
    "TRUNCATE audit_event CASCADE", "UPDATE audit_chainlink SET hash = 'x'",
    "DELETE FROM audit_chainlink", "TRUNCATE audit_chainlink"])
def test_postgres_refuses_changes_with_the_triggers_on(statement):
    needs_postgres()
    events(2)
    with pytest.raises(DatabaseError, match="append-only"), transaction.atomic():
        with connection.cursor() as cursor:
            cursor.execute("SET CONSTRAINTS ALL IMMEDIATE")  # else TRUNCATE stops earlier
            cursor.execute(statement)


@pytest.mark.django_db(transaction=True)
def test_an_event_of_a_long_transaction_is_linked_when_it_commits(settings):
    settings.AUDIT_SEAL_EVERY_EVENTS = 1
    with transaction.atomic():
        event = record("test.long", summary="inside an ingest")
        assert not ChainLink.objects.filter(event=event).exists()
    assert ChainLink.objects.filter(event=event).exists()
    assert verify().ok


@pytest.mark.django_db(transaction=True)
def test_concurrent_writers_make_one_unbroken_chain():
    """Four processes write 40 events each at once, every event sealed after its commit."""
    needs_postgres()
    settings = connection.settings_dict
    url = (f"postgres://{settings['USER']}@{settings['HOST'] or '127.0.0.1'}:"
           f"{settings['PORT'] or 5432}/{settings['NAME']}")
    script = (
        "import os, sys, django\n"
        "django.setup()\n"
        "from portal.audit.events import record\n"
        "for i in range(40):\n"
        "    record('test.concurrent', summary=f'{sys.argv[1]}-{i}', params={'i': i})\n")
    env = {**os.environ, "DATABASE_URL": url, "DJANGO_SETTINGS_MODULE": "portal.settings"}
    writers = [subprocess.Popen([sys.executable, "-c", script, str(n)], cwd=REPO, env=env)
               for n in range(4)]
    assert [w.wait(timeout=300) for w in writers] == [0, 0, 0, 0]
    assert Event.objects.filter(verb="test.concurrent").count() == 160
    # The writers linked their events as they went (every 32 events or 2 s each); what each
    # left at its end is linked by the next sealer, here this process.
    assert ChainLink.objects.filter(event__verb="test.concurrent").count() >= 4 * 32
    seal_pending()
    assert not Event.objects.filter(link__isnull=True).exists()
    result = verify(seal_first=False)
    assert result.ok, result.problem
    seqs = list(ChainLink.objects.order_by("seq").values_list("seq", flat=True))
    assert seqs == list(range(1, len(seqs) + 1))


@pytest.mark.django_db
def test_removing_a_user_neither_blocks_nor_breaks_the_chain():
    from tests.helpers import member

    person, _ = member("leaving", role="operator")
    event = record("test.by_person", actor=person, summary="done by someone who leaves")
    seal_pending()
    person.delete()
    stored = Event.objects.get(pk=event.pk)
    assert stored.actor_snapshot["username"] == "leaving"
    assert verify().ok
