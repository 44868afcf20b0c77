from django.core.management.base import BaseCommand, CommandError

from portal.accounts.models import Role
from portal.accounts.setup import SetupError, add_member


class Command(BaseCommand):
    help = (
        "Give a person a role at a site within one study, creating their account if needed (a "
        "one-time password is printed once). A role counts in that study only; --study may be "
        "left out when the site takes part in one study. Safe to run again. Roles: "
        + ", ".join(Role.values)
    )

    def add_arguments(self, parser):
        parser.add_argument("username")
        parser.add_argument("--site", help="slug of the site (not needed for operator)")
        parser.add_argument("--study", help="slug of the study the role is for (needed when "
                                                 "the site takes part in several)")
        parser.add_argument("--role", required=True, help=", ".join(Role.values))
        parser.add_argument("--email", default="")

    def handle(self, *args, username, site, study, role, email, **options):
        try:
            user, password = add_member(username, role=role, site_slug=site, study_slug=study,
                                        email=email)
        except SetupError as exc:
            raise CommandError(str(exc)) from None
        where = ""
        if site:
            held = user.memberships.filter(site__slug=site, role=role).select_related("study")
            where = f" at {site} in " + ", ".join(sorted(m.study.slug for m in held))
        self.stdout.write(f"{user.username}: {Role(role).label}{where}")
        if password:
            self.stdout.write(f"one-time password: {password}  (shown once; change it after "
                              "signing in)")
