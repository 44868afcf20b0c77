"""Feature sets for scripts: list, detail, and the Parquet table."""

from django.http import JsonResponse
from django.urls import reverse
from django.views.decorators.http import require_GET

from portal.accounts.permissions import access, visible_studies
from portal.api_lists import answers_bad_query, filtered, page, when
from portal.api_spec import (
    BOOLEAN,
    DATETIME,
    INTEGER,
    RESEARCH_USE,
    STRING,
    array,
    nullable,
    obj,
    with_notice,
)
from portal.features.access import may_download, may_see, set_sites, visible_set
from portal.features.downloads import feature_set_file
from portal.features.models import FeatureSet, FeatureSetState

STATES = tuple(FeatureSetState.values)

SET_SCHEMA = obj({"id": INTEGER, "study": STRING, "sites": array(STRING),
                  "state": {"type": "string", "enum": list(STATES)}, "n_rows": INTEGER,
                  "n_columns": INTEGER, "table_sha256": STRING, "table_bytes": INTEGER,
                  "created_at": DATETIME, "finished_at": nullable(DATETIME),
                  "download": STRING})
SET_DETAIL_SCHEMA = obj({**SET_SCHEMA["properties"], "versions": array(INTEGER),
                         "sidecar_sha256": STRING, "params": {"type": "object"},
                         "params_digest": STRING, "code_version": STRING,
                         "error": nullable(STRING), "may_download": BOOLEAN,
                         "research_use": STRING})


def set_json(feature_set, sites=None):
    sites = set_sites(feature_set) if sites is None else sites
    return {"id": feature_set.pk, "study": feature_set.study.slug,
            "sites": [s.slug for s in sites], "state": feature_set.state,
            "n_rows": feature_set.n_rows, "n_columns": feature_set.n_columns,
            "table_sha256": feature_set.table_sha256, "table_bytes": feature_set.table_bytes,
            "created_at": when(feature_set.created_at),
            "finished_at": when(feature_set.finished_at),
            "download": reverse("api:feature_set_download", args=[feature_set.pk])}


@access("checked")
@require_GET
@answers_bad_query
def feature_sets(request):
    """Feature sets whose every site the token sees, newest first."""
    rows = filtered(request, FeatureSet.objects.filter(study__in=visible_studies(request.user))
                    .select_related("study"),
                    {"study": "study__slug", "site": None, "state": ("state", STATES),
                     "created": "created_at"})
    site = request.GET.get("site", "")
    if site:
        rows = rows.filter(pk__in=FeatureSet.objects.filter(versions__site__slug=site)
                           .values("pk"))
    return JsonResponse(page(request, "feature_sets", rows, set_json,
                             visible=lambda fs: may_see(request.user, fs)))


@access("checked")
@require_GET
def feature_set(request, set_id):
    feature_set, sites = visible_set(request.user, set_id)
    return JsonResponse({
        **set_json(feature_set, sites),
        "versions": sorted(feature_set.versions.values_list("pk", flat=True)),
        "sidecar_sha256": feature_set.sidecar_sha256, "params": feature_set.params,
        "params_digest": feature_set.params_digest, "code_version": feature_set.code_version,
        "error": feature_set.error or None,
        "may_download": may_download(request.user, feature_set, sites),
        "research_use": RESEARCH_USE})


@access("checked")
@require_GET
def feature_set_download(request, set_id):
    """The table as Parquet: the web download itself (same rules, same audit event)."""
    return with_notice(feature_set_file(request, set_id, "parquet"))
