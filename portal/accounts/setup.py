"""Setting up a consortium without the browser: studies, sites and members, idempotently."""

import secrets

from django.contrib.auth import get_user_model
from django.core.validators import validate_slug
from django.db import transaction

from portal.accounts.models import AccountFlags, Membership, Role, Site, Study
from portal.audit.events import record


class SetupError(ValueError):
    """A setup request naming something unknown; the message lists what is known."""


def _check_slug(slug, what):
    try:
        validate_slug(slug)
    except Exception:
        raise SetupError(
            f"{what} {slug!r}: use letters, digits, '-' or '_' only (e.g. 'north-lab')"
        ) from None


def get_study(slug):
    try:
        return Study.objects.get(slug=slug)
    except Study.DoesNotExist:
        known = ", ".join(Study.objects.values_list("slug", flat=True)) or "none yet"
        raise SetupError(f"unknown study {slug!r}; known studies: {known}. "
                         "Create it with: manage.py add_study SLUG --name NAME") from None


def get_site(slug):
    try:
        return Site.objects.get(slug=slug)
    except Site.DoesNotExist:
        known = ", ".join(Site.objects.values_list("slug", flat=True)) or "none yet"
        raise SetupError(
            f"unknown site {slug!r}; known sites: {known}. "
            "Create it with: manage.py add_site SLUG --study STUDY --name NAME"
        ) from None


def add_study(slug, *, name):
    """Create the study or update its name; returns (study, created)."""
    from portal.studies.models import current_protocol

    _check_slug(slug, "study")
    with transaction.atomic():
        study, created = Study.objects.get_or_create(slug=slug, defaults={"name": name})
        if not created and study.name != name:
            record("study.renamed", target=study, study=study,
                   summary=f"study {slug} renamed to {name!r}",
                   params={"from": study.name, "to": name})
            study.name = name
            study.save(update_fields=["name"])
        if created:
            record("study.created", target=study, study=study, summary=f"study {slug} created",
                   params={"name": name})
        current_protocol(study)
    return study, created


def add_site(slug, *, study_slug, name):
    """Create the site (or update its name) and let it take part in the study."""
    _check_slug(slug, "site")
    with transaction.atomic():
        study = get_study(study_slug)
        site, created = Site.objects.get_or_create(slug=slug, defaults={"name": name})
        if not created and site.name != name:
            record("site.renamed", target=site, site=site, study=study,
                   summary=f"site {slug} renamed to {name!r}",
                   params={"from": site.name, "to": name})
            site.name = name
            site.save(update_fields=["name"])
        joined = not site.studies.filter(pk=study.pk).exists()
        if joined:
            site.studies.add(study)
        if created or joined:
            record("site.joined", target=site, site=site, study=study,
                   summary=f"site {slug} takes part in {study.slug}", params={"name": name})
    return site, created


def _membership_study(site, study_slug):
    """The study a role at ``site`` is for: the one named, or the site's only study."""
    studies = list(site.studies.order_by("slug"))
    if study_slug:
        study = get_study(study_slug)
        if study not in studies:
            known = ", ".join(s.slug for s in studies) or "none"
            raise SetupError(f"site {site.slug} does not take part in study {study_slug!r} "
                             f"(it takes part in: {known}); add it first with: manage.py "
                             f"add_site {site.slug} --study {study_slug} --name NAME")
        return study
    if len(studies) == 1:
        return studies[0]
    if not studies:
        raise SetupError(f"site {site.slug} takes part in no study yet; add it to one with: "
                         f"manage.py add_site {site.slug} --study STUDY --name NAME")
    raise SetupError(f"site {site.slug} takes part in several studies "
                     f"({', '.join(s.slug for s in studies)}): say which one with --study; a "
                     "role counts in that study only")


def add_member(username, *, role, site_slug=None, study_slug=None, email=""):
    """Give a user a role at a site within one study, creating the user if needed.

    ``study_slug`` may be left out when the site takes part in exactly one study. Returns
    (user, one-time password or None if the user already existed).
    """
    if role not in Role.values:
        raise SetupError(f"unknown role {role!r}; roles: {', '.join(Role.values)}")
    User = get_user_model()
    with transaction.atomic():
        site = study = None
        if role != Role.OPERATOR or site_slug:
            if not site_slug:
                raise SetupError(f"role {role} needs --site SLUG")
            site = get_site(site_slug)
            study = _membership_study(site, study_slug)
        user = User.objects.filter(username=username).first()
        password = None
        if user is None:
            password = secrets.token_urlsafe(12)
            user = User.objects.create_user(username=username, email=email, password=password)
            AccountFlags.require_new_password(user)
            record("user.created", target=user, summary=f"user {username} created")
        if role == Role.OPERATOR and not (user.is_staff and user.is_superuser):
            user.is_staff = user.is_superuser = True
            user.save(update_fields=["is_staff", "is_superuser"])
            record("membership.changed", target=user, summary=f"{username} is now an operator",
                   params={"role": role})
        if site is not None:
            _, created = Membership.objects.get_or_create(user=user, site=site, study=study,
                                                          role=role)
            if created:
                record("membership.changed", target=user, site=site, study=study,
                       summary=f"{username} is {Role(role).label} at {site.slug} in "
                               f"{study.slug}",
                       params={"role": role, "site": site.slug, "study": study.slug,
                               "change": "added"})
    return user, password
