"""Who may read which part of the audit trail.

An event is visible when its (site, study) pair is; an event of a whole study (no site) to
those who see the whole study; an event of a site with no study to those who see that site
in some study; and every person sees their own actions. (Lineage and reproductions have
their rules in portal/lineage/access.py.)
"""

from django.db.models import Q

from portal.accounts.permissions import pairs_q, scope_of
from portal.audit.models import Event


def visible_events(user):
    scope = scope_of(user)
    if scope.operator:
        return Event.objects.all()
    return Event.objects.filter(
        pairs_q(user)
        | Q(site__isnull=True, study_id__in=sorted(scope.wide_studies))
        | Q(study__isnull=True, site_id__in=sorted(scope.sites()))
        | Q(actor=user)
    )
