from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand, CommandError
from django.db import transaction

from portal.accounts.models import Membership, Role
from portal.accounts.setup import SetupError, get_site, get_study
from portal.audit.events import record


def held(user):
    """The roles a user holds, as a person reads them."""
    roles = [f"{m.role} at {m.site.slug} in {m.study.slug}"
             for m in user.memberships.select_related("site", "study")]
    if user.is_superuser or user.is_staff:
        roles.insert(0, "operator")
    return ", ".join(roles) or "none"


class Command(BaseCommand):
    help = (
        "Take a role away from a person: one role at a site (--site, --role, and --study when "
        "the person holds it in several studies), the operator role (--role operator), or "
        "every role (--all). Records an audit event for each role removed; safe to run again."
    )

    def add_arguments(self, parser):
        parser.add_argument("username")
        parser.add_argument("--role", help=", ".join(Role.values))
        parser.add_argument("--site", help="slug of the site the role is held at")
        parser.add_argument("--study", help="slug of the study the role counts in")
        parser.add_argument("--all", dest="every", action="store_true",
                            help="remove every role the person holds")
        parser.add_argument("--reason", required=True, help="why, kept in the audit event")

    def handle(self, *args, username, role, site, study, every, reason, **options):
        user = get_user_model().objects.filter(username=username).first()
        if user is None:
            raise CommandError(f"no user named {username!r} (names are case-sensitive)")
        if every == bool(role):
            raise CommandError("give either --role (with --site for a site role) or --all")
        with transaction.atomic():
            try:
                removed = self._remove(user, role=role, site_slug=site, study_slug=study,
                                       reason=reason, every=every)
            except SetupError as exc:
                raise CommandError(str(exc)) from None
        if not removed:
            self.stdout.write(f"{username} holds no such role; nothing to do (roles held: "
                              f"{held(user)})")
        for line in removed:
            self.stdout.write(f"{username}: {line} removed")

    def _remove(self, user, *, role, site_slug, study_slug, reason, every):
        removed = []
        if (every or role == Role.OPERATOR) and (user.is_superuser or user.is_staff):
            user.is_superuser = user.is_staff = False
            user.save(update_fields=["is_superuser", "is_staff"])
            record("membership.changed", target=user,
                   summary=f"{user.username} is no longer an operator",
                   params={"role": Role.OPERATOR, "change": "removed", "reason": reason})
            removed.append("operator")
        if role == Role.OPERATOR:
            return removed
        memberships = Membership.objects.filter(user=user).select_related("site", "study")
        if not every:
            if role not in Role.values:
                raise SetupError(f"unknown role {role!r}; roles: {', '.join(Role.values)}")
            if not site_slug:
                raise SetupError(f"role {role} is held at a site: give --site SLUG")
            memberships = memberships.filter(role=role, site=get_site(site_slug))
            if study_slug:
                memberships = memberships.filter(study=get_study(study_slug))
            elif len({m.study_id for m in memberships}) > 1:
                raise SetupError(
                    f"{user.username} is {role} at {site_slug} in several studies ("
                    + ", ".join(sorted(m.study.slug for m in memberships))
                    + "): say which with --study")
        for membership in memberships:
            what = f"{membership.role} at {membership.site.slug} in {membership.study.slug}"
            record("membership.changed", target=user, site=membership.site,
                   study=membership.study,
                   summary=f"{user.username} is no longer {Role(membership.role).label} at "
                           f"{membership.site.slug} in {membership.study.slug}",
                   params={"role": membership.role, "site": membership.site.slug,
                           "study": membership.study.slug, "change": "removed",
                           "reason": reason})
            membership.delete()
            removed.append(what)
        return removed
