"""Studies and sites a token sees, for scripts (the API's starting point: slugs to filter by)."""

from django.http import JsonResponse
from django.views.decorators.http import require_GET

from portal.accounts.models import Site
from portal.accounts.permissions import (
    access,
    visible_sites,
    visible_studies,
    visible_studies_at,
)
from portal.api_lists import answers_bad_query, filtered, page, when
from portal.api_spec import DATETIME, STRING, array, obj

STUDY_SCHEMA = obj({"slug": STRING, "name": STRING, "created_at": DATETIME,
                    "sites": array(STRING)})
SITE_SCHEMA = obj({"slug": STRING, "name": STRING, "created_at": DATETIME,
                   "studies": array(STRING)})


@access("checked")
@require_GET
@answers_bad_query
def studies(request):
    """The studies in which the token sees some site's data, with those sites."""
    user = request.user
    rows = filtered(request, visible_studies(user), {"created": "created_at"})

    def item(study):
        return {"slug": study.slug, "name": study.name, "created_at": when(study.created_at),
                "sites": sorted(visible_sites(user, study).values_list("slug", flat=True))}

    return JsonResponse(page(request, "studies", rows, item))


@access("checked")
@require_GET
@answers_bad_query
def sites(request):
    """The sites whose data the token sees, each with the studies it is seen in (``?study=``
    keeps the sites seen in that study)."""
    user = request.user
    rows = filtered(request, visible_sites(user), {"created": "created_at", "study": None})
    slug = request.GET.get("study", "")
    if slug:
        study = visible_studies(user).filter(slug=slug).first()
        rows = rows.filter(pk__in=visible_sites(user, study).values("pk")) if study \
            else Site.objects.none()

    def item(site):
        return {"slug": site.slug, "name": site.name, "created_at": when(site.created_at),
                "studies": sorted(visible_studies_at(user, site).values_list("slug",
                                                                             flat=True))}

    return JsonResponse(page(request, "sites", rows, item))

