import secrets

from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand, CommandError
from django.db import transaction

from portal.accounts import throttle
from portal.accounts.models import AccountFlags
from portal.audit.events import record


class Command(BaseCommand):
    help = (
        "Give a person a new one-time password (printed once): their sessions end, they must "
        "choose their own password after signing in, and their account's failed log-ins are "
        "forgotten. Records an audit event. Each run issues a new password."
    )

    def add_arguments(self, parser):
        parser.add_argument("username")
        parser.add_argument("--reason", required=True, help="why, kept in the audit event")

    def handle(self, *args, username, reason, **options):
        user = get_user_model().objects.filter(username=username).first()
        if user is None:
            raise CommandError(f"no user named {username!r} (names are case-sensitive)")
        if not user.is_active:
            raise CommandError(f"{username}'s account is inactive: a password would not let "
                               "them sign in")
        password = secrets.token_urlsafe(12)
        with transaction.atomic():
            user.set_password(password)  # changes the session hash: signed-in sessions end
            user.save(update_fields=["password"])
            AccountFlags.require_new_password(user)
            throttle.clear_failures(username)
            record("password.reset", target=user, summary=f"{username}'s password reset by an "
                   "operator", params={"reason": reason})
        self.stdout.write(f"{username}: one-time password: {password}  (shown once; they choose "
                          "their own after signing in)")
