"""The audit trail as a browsable list, scoped to what the reader may see."""

from django.core.paginator import Paginator
from django.db.models import Q
from django.shortcuts import render

from portal.accounts.models import STUDY_WIDE_ROLES
from portal.accounts.permissions import access, is_operator, visible_sites
from portal.audit.models import Event


def visible_events(user):
    if is_operator(user):
        return Event.objects.all()
    sites = visible_sites(user)
    wide = user.memberships.filter(role__in=STUDY_WIDE_ROLES).values("site__studies")
    return Event.objects.filter(
        Q(site__in=sites) | Q(site__isnull=True, study__in=wide) | Q(actor=user)
    )


@access("checked")
def event_list(request):
    events = visible_events(request.user).select_related("site", "study")
    verb = request.GET.get("verb", "").strip()
    if verb:
        events = events.filter(verb__startswith=verb)
    page = Paginator(events, 50).get_page(request.GET.get("page"))
    return render(request, "audit/events.html", {"page": page, "verb": verb})
