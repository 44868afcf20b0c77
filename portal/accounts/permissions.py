"""The one place that answers "what may this user see and do?".

A role is held at a site *within one study* (a site may take part in several studies). Every
object in Cairn belongs to a study and to one or more sites, so every check is made on
(site, study) pairs:

* an operator (superuser) may do everything;
* a site data manager sees their site's data in that study and uploads to it;
* a site analyst sees their site's data in that study (QC, features, training, releases);
* a study lead sees every site's data of the study they lead and edits its protocol;
* an auditor sees what a study lead sees and may change nothing.

:func:`scope_of` computes, once per user object, the pairs each action reaches; the helpers
below and each app's ``access.py`` (rules about that app's objects) ask it, never the
memberships directly.
"""

import enum
from dataclasses import dataclass, field
from functools import wraps

from django.contrib.auth.views import redirect_to_login
from django.core.exceptions import PermissionDenied
from django.db.models import Q
from django.shortcuts import get_object_or_404

from portal.accounts.models import STUDY_WIDE_ROLES, Membership, Role, Site, Study


class Action(enum.StrEnum):
    VIEW = "view"
    UPLOAD = "upload"
    EDIT_PROTOCOL = "edit_protocol"
    RUN_JOBS = "run_jobs"
    DOWNLOAD = "download"


#: Which roles may take a write action at the (site, study) concerned. A study lead may
#: also start work at every site of the study they lead.
WRITE_ROLES = {
    Action.UPLOAD: {Role.DATA_MANAGER},
    Action.EDIT_PROTOCOL: {Role.STUDY_LEAD},
    Action.RUN_JOBS: {Role.ANALYST, Role.STUDY_LEAD, Role.DATA_MANAGER},
}


def is_operator(user):
    return bool(getattr(user, "is_authenticated", False) and user.is_active and user.is_superuser)


def _signed_in(user):
    return bool(getattr(user, "is_authenticated", False) and user.is_active)


@dataclass(frozen=True)
class Scope:
    """The (site id, study id) pairs a user reaches, per kind of action."""

    operator: bool = False
    view: frozenset = field(default_factory=frozenset)
    upload: frozenset = field(default_factory=frozenset)
    run: frozenset = field(default_factory=frozenset)
    lead_studies: frozenset = field(default_factory=frozenset)
    wide_studies: frozenset = field(default_factory=frozenset)
    roles: tuple = ()

    def pairs(self, action):
        action = Action(action)
        if action in (Action.VIEW, Action.DOWNLOAD):
            return self.view
        if action is Action.UPLOAD:
            return self.upload
        if action is Action.RUN_JOBS:
            return self.run
        raise ValueError(f"{action} is decided per study, not per (site, study)")

    def allows(self, action, site_id, study_id):
        return self.operator or (site_id, study_id) in self.pairs(action)

    def studies(self, action=Action.VIEW):
        return {study for _, study in self.pairs(action)}

    def sites(self, action=Action.VIEW, study_id=None):
        return {site for site, study in self.pairs(action)
                if study_id is None or study == study_id}

    def studies_at(self, site_id, action=Action.VIEW):
        return {study for site, study in self.pairs(action) if site == site_id}


def _compute_scope(user):
    if not _signed_in(user):
        return Scope()
    if is_operator(user):
        return Scope(operator=True)
    held = list(Membership.objects.filter(user=user).values_list("site_id", "study_id", "role"))
    studies = {study for _, study, _ in held}
    taking_part = set(Site.studies.through.objects.filter(study_id__in=studies)
                      .values_list("site_id", "study_id"))
    # a role at a site that no longer takes part in the study grants nothing
    held = [(site, study, role) for site, study, role in held if (site, study) in taking_part]
    wide = {study for _, study, role in held if role in STUDY_WIDE_ROLES}
    leads = {study for _, study, role in held if role == Role.STUDY_LEAD}
    whole = {pair for pair in taking_part if pair[1] in wide}
    own = {(site, study) for site, study, _ in held}
    return Scope(
        view=frozenset(own | whole),
        upload=frozenset((s, t) for s, t, role in held if role in WRITE_ROLES[Action.UPLOAD]),
        run=frozenset({(s, t) for s, t, role in held if role in WRITE_ROLES[Action.RUN_JOBS]}
                      | {pair for pair in taking_part if pair[1] in leads}),
        lead_studies=frozenset(leads), wide_studies=frozenset(wide),
        roles=tuple(sorted(held)),
    )


def scope_of(user):
    """The user's :class:`Scope`, computed once per user object (i.e. once per request)."""
    cached = getattr(user, "_cairn_scope", None)
    if cached is None:
        cached = _compute_scope(user)
        if user is not None and _signed_in(user):
            user._cairn_scope = cached
    return cached


def forget_scope(user):
    """Drop the cached scope (after the user's memberships changed)."""
    if user is not None and hasattr(user, "_cairn_scope"):
        del user._cairn_scope


def _pk(obj):
    return getattr(obj, "pk", obj)


def can(user, action, *, site=None, study=None):
    """True if ``user`` may take ``action`` on ``site``'s data in ``study``.

    Site-level actions need both the site and the study; editing a protocol needs the study.
    """
    if not _signed_in(user):
        return False
    scope = scope_of(user)
    if scope.operator:
        return True
    action = Action(action)
    if action is Action.EDIT_PROTOCOL:
        return study is not None and _pk(study) in scope.lead_studies
    if site is None or study is None:
        raise ValueError(f"can({action}) needs both the site and the study the data belongs to")
    return scope.allows(action, _pk(site), _pk(study))


def require(user, action, *, site=None, study=None):
    if not can(user, action, site=site, study=study):
        raise PermissionDenied(f"not allowed to {Action(action).value} here")


def is_lead(user, study):
    """Study lead of ``study`` (or operator): approves releases, edits the protocol."""
    scope = scope_of(user)
    return scope.operator or _pk(study) in scope.lead_studies


def sees_whole_study(user, study):
    """Study lead or auditor of ``study`` (or operator): sees every site's data in it."""
    scope = scope_of(user)
    return scope.operator or _pk(study) in scope.wide_studies


def uploads_anywhere(user):
    """True if the user may upload for at least one (site, study) (cheap early refusal)."""
    scope = scope_of(user)
    return scope.operator or bool(scope.upload)


def runs_anywhere(user):
    scope = scope_of(user)
    return scope.operator or bool(scope.run)


def pairs_q(user, action=Action.VIEW, *, site="site", study="study"):
    """A filter keeping rows whose ``site``/``study`` fields name a pair the user reaches."""
    scope = scope_of(user)
    if scope.operator:
        return Q()
    by_study = {}
    for site_id, study_id in scope.pairs(action):
        by_study.setdefault(study_id, set()).add(site_id)
    q = Q(pk__in=[])
    for study_id, site_ids in by_study.items():
        q |= Q(**{f"{study}_id": study_id, f"{site}_id__in": sorted(site_ids)})
    return q


def visible_studies(user):
    scope = scope_of(user)
    if scope.operator:
        return Study.objects.all()
    return Study.objects.filter(pk__in=scope.studies())


def visible_sites(user, study=None):
    """Sites whose data this user may see (in ``study`` if given, else in any study)."""
    scope = scope_of(user)
    if scope.operator:
        return Site.objects.filter(studies=study) if study is not None else Site.objects.all()
    return Site.objects.filter(pk__in=scope.sites(study_id=_pk(study) if study else None))


def visible_studies_at(user, site):
    """The studies in which the user sees ``site``'s data."""
    scope = scope_of(user)
    if scope.operator:
        return site.studies.all()
    return Study.objects.filter(pk__in=scope.studies_at(_pk(site)))


def get_visible_site(user, slug):
    """The site with this slug if the user sees its data in some study; 404 otherwise."""
    return get_object_or_404(visible_sites(user), slug=slug)


def get_visible_study(user, slug):
    return get_object_or_404(visible_studies(user), slug=slug)


def access(rule):
    """Mark a view with how it is protected; the suite refuses views without this mark.

    ``rule`` is "public" (no log-in), "account" (any signed-in user, own account only) or
    "checked" (signed-in; the view asks an ``access`` module or the helpers above).
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
