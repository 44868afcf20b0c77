"""The one place that answers "what may this user see and do?".

Every view, API endpoint and download asks here. The rules:

* an operator (superuser) may do everything;
* a site data manager sees their own site and uploads to it;
* a site analyst sees their own site (QC, features, training, model releases);
* a study lead sees every site of the studies their site takes part in and edits those
  studies' protocols;
* an auditor sees what a study lead sees and may change nothing.
"""

import enum
from functools import wraps

from django.contrib.auth.views import redirect_to_login
from django.core.exceptions import PermissionDenied
from django.db.models import Q

from portal.accounts.models import STUDY_WIDE_ROLES, Membership, Role, Site, Study


class Action(enum.StrEnum):
    VIEW = "view"
    UPLOAD = "upload"
    EDIT_PROTOCOL = "edit_protocol"
    RUN_JOBS = "run_jobs"
    DOWNLOAD = "download"


#: Which roles may take a write action at the site (or study) concerned.
WRITE_ROLES = {
    Action.UPLOAD: {Role.DATA_MANAGER},
    Action.EDIT_PROTOCOL: {Role.STUDY_LEAD},
    Action.RUN_JOBS: {Role.ANALYST, Role.STUDY_LEAD, Role.DATA_MANAGER},
}


def is_operator(user):
    return bool(getattr(user, "is_authenticated", False) and user.is_active and user.is_superuser)


def _memberships(user):
    if not getattr(user, "is_authenticated", False) or not user.is_active:
        return Membership.objects.none()
    return Membership.objects.filter(user=user)


def visible_studies(user):
    if is_operator(user):
        return Study.objects.all()
    return Study.objects.filter(sites__memberships__in=_memberships(user)).distinct()


def visible_sites(user):
    """Sites whose data this user may see."""
    if is_operator(user):
        return Site.objects.all()
    mine = _memberships(user)
    wide_studies = Study.objects.filter(
        sites__memberships__in=mine.filter(role__in=STUDY_WIDE_ROLES)
    )
    return Site.objects.filter(
        Q(memberships__in=mine) | Q(studies__in=wide_studies)
    ).distinct()


def roles_at(user, site):
    return set(_memberships(user).filter(site=site).values_list("role", flat=True))


def study_roles(user, study):
    """Roles the user holds at any site of the study."""
    return set(
        _memberships(user).filter(site__studies=study).values_list("role", flat=True)
    )


def can(user, action, *, site=None, study=None):
    """True if ``user`` may take ``action`` on ``site`` (and/or ``study``)."""
    if not getattr(user, "is_authenticated", False) or not user.is_active:
        return False
    if is_operator(user):
        return True
    action = Action(action)
    if site is not None and study is not None and not site.studies.filter(pk=study.pk).exists():
        return False
    if action in (Action.VIEW, Action.DOWNLOAD):
        if site is not None:
            return visible_sites(user).filter(pk=site.pk).exists()
        if study is not None:
            return visible_studies(user).filter(pk=study.pk).exists()
        return False
    allowed = WRITE_ROLES[action]
    if action is Action.EDIT_PROTOCOL:
        return study is not None and bool(study_roles(user, study) & allowed)
    if site is None:
        return False
    return bool(roles_at(user, site) & allowed) or (
        Role.STUDY_LEAD in allowed
        and study is not None and Role.STUDY_LEAD in study_roles(user, study)
    )


def uploads_anywhere(user):
    """True if the user may upload for at least one site (cheap early refusal for the API)."""
    return is_operator(user) or _memberships(user).filter(
        role__in=WRITE_ROLES[Action.UPLOAD]).exists()


def require(user, action, *, site=None, study=None):
    if not can(user, action, site=site, study=study):
        raise PermissionDenied(f"not allowed to {Action(action).value} here")


def access(rule):
    """Mark a view with how it is protected; the suite refuses views without this mark.

    ``rule`` is "public" (no log-in), "account" (any signed-in user, own account only) or
    "checked" (signed-in; the view calls :func:`require` or filters by :func:`visible_sites`).
    """
    if rule not in {"public", "account", "checked"}:
        raise ValueError(f"unknown access rule {rule!r}")

    def decorate(view):
        if rule == "public":
            wrapped = view
        else:
            @wraps(view)
            def wrapped(request, *args, **kwargs):
                if not request.user.is_authenticated:
                    if getattr(request, "api_token", None) is not None or request.path.startswith(
                        "/api/"
                    ):
                        raise PermissionDenied("an API token or log-in is required")
                    return redirect_to_login(request.get_full_path())
                return view(request, *args, **kwargs)
        wrapped.cairn_access = rule
        return wrapped

    return decorate


def get_visible_site(user, slug):
    """The site with this slug if the user may see it; 404 otherwise (no hint it exists)."""
    from django.shortcuts import get_object_or_404

    return get_object_or_404(visible_sites(user), slug=slug)


def get_visible_study(user, slug):
    from django.shortcuts import get_object_or_404

    return get_object_or_404(visible_studies(user), slug=slug)
