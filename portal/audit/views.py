"""The audit trail as a browsable list, scoped to what the reader may see: filters, keyset
pagination (fast at any depth: each page is an index range on (time, id)), CSV export."""

import csv
import datetime
import io
import json
from urllib.parse import urlencode

from django.contrib import messages
from django.core.exceptions import PermissionDenied
from django.db.models import Q
from django.http import Http404, StreamingHttpResponse
from django.shortcuts import redirect, render
from django.urls import reverse
from django.utils.dateparse import parse_date
from django.utils.http import url_has_allowed_host_and_scheme
from django.views.decorators.http import require_POST

from portal.accounts.permissions import access
from portal.audit import reproduce
from portal.audit.access import lineage_object, reproduction_subject_visible, visible_events
from portal.audit.models import ChainLink, Event
from portal.features.models import FeatureSet
from portal.quality.models import QCRun
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
    from portal.audit.chain import read_anchors

    head = ChainLink.objects.order_by("-seq").values("seq", "hash", "sealed_at").first()
    anchors = read_anchors()
    checked = Event.objects.filter(verb="audit.verified").order_by("-at", "-id").first()
    return {"head": head, "anchor": anchors[-1] if anchors else None,
            "unsealed": Event.objects.filter(link__isnull=True).count(),
            "checked": checked}


PARAMETER_KEYS = ("cairn:params", "cairn:spec", "cairn:settings")


def lineage_rows(doc):
    rows = []
    for record in doc.get_records():
        kind = type(record).__name__.replace("Prov", "")
        if kind not in ("Entity", "Activity", "Agent"):
            continue
        attributes = {str(k): str(v) for k, v in record.attributes}
        parameters = {key.split(":", 1)[1]: json.dumps(json.loads(attributes.pop(key)),
                                                        indent=2, sort_keys=True)
                      for key in PARAMETER_KEYS if key in attributes}
        rows.append({"kind": kind,
                     "id": str(record.identifier) if record.identifier else "",
                     "type": attributes.pop("prov:type", ""),
                     "details": ", ".join(f"{k.split(':', 1)[-1]}={v}"
                                          for k, v in attributes.items()
                                          if not k.startswith("prov:")),
                     "parameters": parameters})
    return rows


@access("checked")
def lineage_page(request, lineage_kind, object_id):
    from portal.audit.lineage import build

    kind = lineage_kind
    obj, full_sites = lineage_object(request.user, kind, object_id)
    rows = lineage_rows(build(obj, full_sites).doc)
    return render(request, "audit/lineage.html", {
        "obj": obj, "kind": kind, "rows": rows, "object_id": object_id,
        "partial": full_sites is not None})


@access("checked")
def lineage_prov(request, lineage_kind, object_id):
    from django.http import HttpResponse

    from portal.audit.lineage import provenance_json

    kind = lineage_kind
    obj, full_sites = lineage_object(request.user, kind, object_id)
    response = HttpResponse(provenance_json(obj, full_sites), content_type="application/json")
    response["Content-Disposition"] = f'attachment; filename="{kind}-{object_id}.prov.json"'
    return response


@access("checked")
@require_POST
def reproduce_view(request, subject_kind, object_id):
    """Ask for a feature set (``features``) or quality result (``qc``) to be computed again
    from its record; back to the page the form was on."""
    if subject_kind == "features":
        obj = FeatureSet.objects.filter(pk=object_id).first()
        back = reverse("features:detail", kwargs={"set_id": object_id})
    elif subject_kind == "qc":
        obj = QCRun.objects.select_related("site").filter(pk=object_id).first()
        back = reverse("dashboard:site", kwargs={"site_slug": obj.site.slug})
    else:
        raise Http404("nothing of that kind can be computed again")
    if obj is None or not reproduction_subject_visible(request.user, subject_kind, obj):
        raise Http404("no such object")
    allowed = reproduction_subject_visible(request.user, subject_kind, obj, to_start=True)
    if not allowed:
        raise PermissionDenied("you may not start work on this object")
    following = request.POST.get("next", "")
    if following and url_has_allowed_host_and_scheme(following, allowed_hosts=None):
        back = following
    try:
        reproduce.start(subject_kind, obj, user=request.user)
    except ValueError as exc:
        messages.error(request, str(exc))
    else:
        messages.info(request, f"{subject_kind} {obj.pk} is being computed again from its "
                               "record.")
    return redirect(back)


@access("checked")
def derived_page(request, lineage_kind, object_id):
    from portal.audit.derived import derived, root_object

    try:
        obj = root_object(lineage_kind, object_id)
        nodes = derived(request.user, lineage_kind, obj) if obj is not None else None
    except ValueError:
        nodes = None
    if not nodes:
        raise Http404("no such object")
    return render(request, "audit/derived.html", {
        "kind": lineage_kind, "object_id": object_id, "root": nodes[0], "nodes": nodes[1:],
        "lineage_kinds": ("training", "features", "version")})
