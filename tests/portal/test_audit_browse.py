"""Browsing the audit trail: filters, keyset pages that neither skip nor repeat, CSV export
of the filtered view, and nothing of another site."""

import csv
import io

import pytest
from django.urls import reverse

from portal.audit.chain import seal_pending
from portal.audit.events import record
from portal.audit.models import Event

pytestmark = pytest.mark.django_db


def test_pages_cover_every_visible_event_once(client, consortium):
    a1 = consortium["sites"]["a1"]
    for i in range(120):
        record("test.page", site=a1, summary=f"event {i}")
    client.force_login(consortium["people"]["operator"])
    seen, url = [], reverse("audit:events") + "?verb=test.page"
    while url:
        response = client.get(url)
        assert response.status_code == 200
        page = response.context["events"]
        seen += [e.pk for e in page]
        cursor = response.context["next"]
        url = (reverse("audit:events") + f"?verb=test.page&after={cursor}") if cursor else None
    expected = list(Event.objects.filter(verb="test.page").order_by("-at", "-id")
                    .values_list("pk", flat=True))
    assert seen == expected and len(seen) == 120


def test_filters_and_csv_export(client, consortium):
    a1, b1 = consortium["sites"]["a1"], consortium["sites"]["b1"]
    record("test.filter", site=a1, summary="at a1")
    record("test.filter", site=b1, summary="at b1")
    record("other.thing", site=a1, summary="not this verb")
    seal_pending()
    client.force_login(consortium["people"]["operator"])
    page = client.get(reverse("audit:events"), {"verb": "test.filter", "site": "a1"})
    assert [e.summary for e in page.context["events"]] == ["at a1"]
    body = b"".join(client.get(reverse("audit:export"), {"verb": "test.filter"})
                    .streaming_content).decode()
    rows = list(csv.DictReader(io.StringIO(body)))
    assert sorted(r["summary"] for r in rows) == ["at a1", "at b1"]
    assert all(r["link_hash"] for r in rows)  # each row carries its chain link

    # A data manager of site a1 sees none of b1's events, in the list or the export.
    client.force_login(consortium["people"]["dm_a1"])
    page = client.get(reverse("audit:events"), {"verb": "test.filter"})
    assert [e.summary for e in page.context["events"]] == ["at a1"]
    body = b"".join(client.get(reverse("audit:export")).streaming_content).decode()
    assert "at b1" not in body and "at a1" in body
