"""Audit events are append-only, in the ORM and (on PostgreSQL) in the database itself."""

import pytest
from django.db import DatabaseError, connection, transaction

from portal.audit.events import record
from portal.audit.models import AppendOnlyError, Event
from tests.helpers import skip_or_fail

pytestmark = pytest.mark.django_db


def test_orm_refuses_changes():
    event = record("test.thing", summary="first")
    event.summary = "edited"
    with pytest.raises(AppendOnlyError):
        event.save()
    with pytest.raises(AppendOnlyError):
        event.delete()
    with pytest.raises(AppendOnlyError):
        Event.objects.filter(pk=event.pk).update(summary="edited")
    with pytest.raises(AppendOnlyError):
        Event.objects.all().delete()
    assert Event.objects.get(pk=event.pk).summary == "first"


@pytest.mark.django_db(transaction=True)
@pytest.mark.parametrize("sql", [
    "UPDATE audit_event SET summary = 'edited'",
    "DELETE FROM audit_event",
    "TRUNCATE audit_event CASCADE",
])
def test_database_refuses_changes_on_postgresql(sql):
    if connection.vendor != "postgresql":
        skip_or_fail("the triggers exist on PostgreSQL only: set DATABASE_URL=postgres://…")
    record("test.thing", summary="first")
    with pytest.raises(DatabaseError, match="append-only"):
        with transaction.atomic(), connection.cursor() as cursor:
            cursor.execute(sql)
    assert Event.objects.filter(summary="first").count() == 1


def test_event_keeps_actor_snapshot_and_code_version(consortium):
    user = consortium["people"]["dm_a1"]
    event = record("test.thing", actor=user, site=consortium["sites"]["a1"])
    assert event.actor_kind == "user"
    assert event.actor_snapshot["username"] == "dm_a1"
    assert event.actor_snapshot["roles"] == [{"site": "a1", "study": "study-a",
                                              "role": "data_manager"}]
    assert set(event.code_version["libraries"]) >= {"mne", "numpy", "scikit-learn", "skops"}
    assert "commit" in event.code_version
