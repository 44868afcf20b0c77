"""Lineage pages: where an object came from (W3C PROV, as a table and as PROV-JSON), what was
made from it, and asking for a stored result to be computed again from its record."""

import json

from django.contrib import messages
from django.core.exceptions import PermissionDenied
from django.http import Http404, HttpResponse
from django.shortcuts import redirect, render
from django.urls import reverse
from django.utils.http import url_has_allowed_host_and_scheme
from django.views.decorators.http import require_POST

from portal.accounts.permissions import access
from portal.features.models import FeatureSet
from portal.lineage import reproduce
from portal.lineage.access import lineage_object, reproduction_subject_visible
from portal.lineage.derived import derived, root_object
from portal.lineage.prov import build, provenance_json
from portal.quality.models import QCRun
from portal.training.access import refuse_withdrawn

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


SITE_ROWS_PER_PAGE = 100


@access("checked")
def lineage_page(request, lineage_kind, object_id):
    """The steps shared by every site, then one summary line per site (versions, counts,
    quality settings); ``?site=SLUG`` lists that site's records, a page at a time."""
    from django.core.paginator import Paginator

    from portal.lineage.summary import per_site

    kind = lineage_kind
    obj, full_sites = lineage_object(request.user, kind, object_id)
    doc = build(obj, full_sites).doc
    site_of, sites = per_site(doc)
    rows = lineage_rows(doc)
    chosen = request.GET.get("site")
    context = {"obj": obj, "kind": kind, "object_id": object_id, "sites": sites,
               "partial": full_sites is not None}
    if chosen is None:
        context["rows"] = [r for r in rows if r["id"] not in site_of]
    else:
        if chosen not in {s["slug"] for s in sites}:
            raise Http404("no such site in this lineage")
        context["site"] = next(s for s in sites if s["slug"] == chosen)
        context["page"] = Paginator([r for r in rows if site_of.get(r["id"]) == chosen],
                                    SITE_ROWS_PER_PAGE).get_page(request.GET.get("page"))
    return render(request, "lineage/lineage.html", context)


@access("checked")
def lineage_prov(request, lineage_kind, object_id):
    kind = lineage_kind
    obj, full_sites = lineage_object(request.user, kind, object_id)
    if kind == "release":  # a withdrawn release's files, its PROV record included, are refused
        refused = refuse_withdrawn(request, obj, f"{kind}-{object_id}.prov.json")
        if refused is not None:
            return refused
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
    try:
        obj = root_object(lineage_kind, object_id)
        nodes = derived(request.user, lineage_kind, obj) if obj is not None else None
    except ValueError:
        nodes = None
    if not nodes:
        raise Http404("no such object")
    return render(request, "lineage/derived.html", {
        "kind": lineage_kind, "object_id": object_id, "root": nodes[0], "nodes": nodes[1:],
        "lineage_kinds": ("training", "features", "version")})
