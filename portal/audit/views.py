"""The audit trail as a browsable list, scoped to what the reader may see: filters, keyset
pagination (fast at any depth: each page is an index range on (time, id)), CSV export."""

import csv
import datetime
import io
import json
from urllib.parse import urlencode

from django.db.models import Q
from django.http import Http404, StreamingHttpResponse
from django.shortcuts import render
from django.utils.dateparse import parse_date

from cairn_science.canonical_json import canonical_text
from portal.accounts.permissions import access, visible_sites
from portal.audit.access import visible_events
from portal.audit.chain import read_anchors
from portal.audit.kinds import JOBS, KINDS, RESEARCH, kind_of, kinds_q
from portal.audit.links import object_links
from portal.audit.models import ChainLink, Event
from portal.spreadsheet import safe_row

PAGE = 50
FILTERS = ("kind", "jobs", "verb", "site", "actor", "object", "from", "to")


def filtered(request):
    """The reader's events narrowed by the query's filters, newest first; (queryset, dict)."""
    chosen = {key: request.GET.get(key, "").strip() for key in FILTERS}
    if chosen["kind"] not in KINDS and chosen["kind"] != "all":
        chosen["kind"] = ""
    chosen["jobs"] = "1" if chosen["jobs"] else ""
    events = visible_events(request.user)
    # By default the research kinds (portal/audit/kinds.py); "kind" names one kind or "all"
    # (verbs of no known family included); "jobs" adds job bookkeeping to either; a verb
    # prefix searches every kind.
    if chosen["verb"]:
        events = events.filter(verb__startswith=chosen["verb"])
    elif chosen["kind"] == "all":
        if not chosen["jobs"]:
            events = events.exclude(kinds_q([JOBS]))
    else:
        kinds = [chosen["kind"]] if chosen["kind"] else list(RESEARCH)
        if chosen["jobs"] and JOBS not in kinds:
            kinds.append(JOBS)
        events = events.filter(kinds_q(kinds))
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


def _items(values):
    """An event's inputs or outputs as lines of "key value" pairs (hashes in full)."""
    lines = []
    for item in values or []:
        if isinstance(item, dict):
            lines.append(" · ".join(f"{k} {v}" for k, v in sorted(item.items())))
        else:
            lines.append(str(item))
    return lines


def _code(event):
    version = event.code_version or {}
    return version.get("commit", ""), version.get("modified")


def annotate(events, user):
    """Give each event what its row shows: kind, link to its object (or None), inputs,
    outputs, parameters and code version."""
    links = object_links(user, events)
    for event in events:
        event.kind_label = KINDS.get(kind_of(event.verb), ("",))[0]
        event.object_url = links.get((event.target_type, event.target_id))
        event.input_lines = _items(event.inputs)
        event.output_lines = _items(event.outputs)
        event.params_text = json.dumps(event.params, sort_keys=True, indent=1,
                                       ensure_ascii=False) if event.params else ""
        event.commit, event.modified = _code(event)
        event.libraries = ", ".join(f"{k} {v}" for k, v in sorted(
            (event.code_version or {}).get("libraries", {}).items()) if v)
    return events


@access("checked")
def event_list(request):
    events, chosen = filtered(request)
    cursor = request.GET.get("after", "")
    if cursor:
        events = _after(events, cursor)
    rows = list(events.select_related("site", "study")[:PAGE + 1])
    more = len(rows) > PAGE
    rows = annotate(rows[:PAGE], request.user)
    query = urlencode({k: v for k, v in chosen.items() if v})
    return render(request, "audit/events.html", {
        "events": rows, "chosen": chosen, "query": query,
        "kinds": [(key, label) for key, (label, _) in KINDS.items() if key != JOBS],
        "research": [KINDS[k][0] for k in RESEARCH],
        "sites": list(visible_sites(request.user).order_by("slug").values_list("slug", "name")),
        "next": _cursor(rows[-1]) if more and rows else None, "first_page": not cursor,
        "chain": chain_state()})


#: The CSV's columns; inputs, outputs, params and code_versions are JSON (sorted keys).
CSV_COLUMNS = ["id", "at_utc", "kind", "verb", "actor", "actor_kind", "site", "study",
               "object", "summary", "inputs", "outputs", "params", "code_commit",
               "code_modified", "code_versions", "link_seq", "link_hash"]


@access("checked")
def export_csv(request):
    """The filtered view as CSV, streamed in index order, every cell made inert for
    spreadsheets (portal/spreadsheet.py)."""
    events, _ = filtered(request)

    def lines():
        buffer = io.StringIO()
        writer = csv.writer(buffer)
        writer.writerow(CSV_COLUMNS)
        yield buffer.getvalue()
        for event in events.select_related("site", "study", "link").iterator(chunk_size=2000):
            buffer.seek(0)
            buffer.truncate()
            link = getattr(event, "link", None)
            commit, modified = _code(event)
            writer.writerow(safe_row([
                event.pk, event.at.astimezone(datetime.UTC).isoformat(), kind_of(event.verb),
                event.verb, event.actor_snapshot.get("username", ""), event.actor_kind,
                event.site.slug if event.site else "", event.study.slug if event.study else "",
                f"{event.target_type}:{event.target_id}" if event.target_type else "",
                event.summary, canonical_text(event.inputs), canonical_text(event.outputs),
                canonical_text(event.params),
                commit, "" if modified is None else str(modified).lower(),
                canonical_text(event.code_version), link.seq if link else "",
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
