from django.core.management.base import BaseCommand, CommandError

from portal.accounts.models import Role
from portal.accounts.setup import SetupError, add_member


class Command(BaseCommand):
    help = (
        "Give a person a role at a site, creating their account if needed (a one-time password "
        "is printed once). Safe to run again. Roles: " + ", ".join(Role.values)
    )

    def add_arguments(self, parser):
        parser.add_argument("username")
        parser.add_argument("--site", help="slug of the site (not needed for operator)")
        parser.add_argument("--role", required=True, help=", ".join(Role.values))
        parser.add_argument("--email", default="")

    def handle(self, *args, username, site, role, email, **options):
        try:
            user, password = add_member(username, role=role, site_slug=site, email=email)
        except SetupError as exc:
            raise CommandError(str(exc)) from None
        where = f" at {site}" if site else ""
        self.stdout.write(f"{user.username}: {Role(role).label}{where}")
        if password:
            self.stdout.write(f"one-time password: {password}  (shown once; change it after "
                              "signing in)")
