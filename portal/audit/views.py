"""The audit trail as a browsable list, scoped to what the reader may see: filters, keyset
pagination (fast at any depth: each page is an index range on (time, id)), CSV export."""

import csv
import datetime
import io
from urllib.parse import urlencode

from django.db.models import Q
from django.http import Http404, StreamingHttpResponse
from django.shortcuts import render
from django.utils.dateparse import parse_date

from portal.accounts.permissions import access
from portal.audit.access import visible_events
from portal.audit.chain import read_anchors
from portal.audit.models import ChainLink, Event
from portal.spreadsheet import safe_row

PAGE = 50
FILTERS = ("verb", "site", "actor", "object", "from", "to")


def filtered(request):
    """The reader's events narrowed by the query's filters, newest first; (queryset, dict)."""
    chosen = {key: request.GET.get(key, "").strip() for key in FILTERS}
    events = visible_events(request.user)
    if chosen["verb"]:
        events = events.filter(verb__startswith=chosen["verb"])
    if chosen["site"]:
        events = events.filter(site__slug=chosen["site"])
    if chosen["actor"]:
        events = events.filter(actor_snapshot__username=chosen["actor"])
    if chosen["object"]:
        kind, _, ident = chosen["object"].partition(":")
        events = events.filter(target_type=kind)
        if ident:
            events = events.filter(target_id=ident)
    for key, lookup, shift in (("from", "at__gte", 0), ("to", "at__lt", 1)):
        day = parse_date(chosen[key]) if chosen[key] else None
        if day is not None:
            start = datetime.datetime.combine(day, datetime.time(), tzinfo=datetime.UTC)
            events = events.filter(**{lookup: start + datetime.timedelta(days=shift)})
    return events.order_by("-at", "-id"), chosen


CURSOR_TIME = "%Y%m%dT%H%M%S.%fZ"


def _cursor(event):
    """Where the next page starts: the last row's UTC time and id (URL-safe as it is)."""
    return f"{event.at.astimezone(datetime.UTC).strftime(CURSOR_TIME)}~{event.pk}"


def _after(events, cursor):
    at_text, _, ident = cursor.partition("~")
    try:
        at = datetime.datetime.strptime(at_text, CURSOR_TIME).replace(tzinfo=datetime.UTC)
        ident = int(ident)
    except ValueError:
        raise Http404("that page of the audit trail does not exist; start from the newest") \
            from None
    return events.filter(Q(at__lt=at) | Q(at=at, id__lt=ident))


@access("checked")
def event_list(request):
    events, chosen = filtered(request)
    cursor = request.GET.get("after", "")
    if cursor:
        events = _after(events, cursor)
    rows = list(events.select_related("site", "study")[:PAGE + 1])
    more = len(rows) > PAGE
    rows = rows[:PAGE]
    query = urlencode({k: v for k, v in chosen.items() if v})
    return render(request, "audit/events.html", {
        "events": rows, "chosen": chosen, "query": query,
        "next": _cursor(rows[-1]) if more and rows else None, "first_page": not cursor,
        "chain": chain_state()})


@access("checked")
def export_csv(request):
    """The filtered view as CSV, streamed in index order."""
    events, _ = filtered(request)

    def lines():
        buffer = io.StringIO()
        writer = csv.writer(buffer)
        writer.writerow(["id", "at_utc", "verb", "actor", "actor_kind", "site", "study",
                         "object", "summary", "link_seq", "link_hash"])
        yield buffer.getvalue()
        for event in events.select_related("site", "study", "link").iterator(chunk_size=2000):
            buffer.seek(0)
            buffer.truncate()
            link = getattr(event, "link", None)
            writer.writerow(safe_row([event.pk, event.at.astimezone(datetime.UTC).isoformat(),
                             event.verb, event.actor_snapshot.get("username", ""),
                             event.actor_kind, event.site.slug if event.site else "",
                             event.study.slug if event.study else "",
                             f"{event.target_type}:{event.target_id}" if event.target_type
                             else "", event.summary, link.seq if link else "",
                             link.hash if link else ""]))
            yield buffer.getvalue()

    response = StreamingHttpResponse(lines(), content_type="text/csv")
    response["Content-Disposition"] = 'attachment; filename="audit-events.csv"'
    return response


def chain_state():
    """What the page shows of the chain: its head, the last anchor and the last check."""
    head = ChainLink.objects.order_by("-seq").values("seq", "hash", "sealed_at").first()
    anchors = read_anchors()
    checked = Event.objects.filter(verb="audit.verified").order_by("-at", "-id").first()
    return {"head": head, "anchor": anchors[-1] if anchors else None,
            "unsealed": Event.objects.filter(link__isnull=True).count(),
            "checked": checked}
