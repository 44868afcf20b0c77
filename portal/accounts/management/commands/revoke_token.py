from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand, CommandError
from django.db import transaction
from django.utils import timezone

from portal.accounts.models import ApiToken
from portal.audit.events import record


def lookup_of(text):
    """The token's lookup from what an operator has: the whole token, ``cairn_<lookup>…`` as
    pages show it, or the lookup alone."""
    text = text.strip().rstrip("…").removeprefix(ApiToken.PREFIX)
    return text.split("_", 1)[0]


class Command(BaseCommand):
    help = (
        "Revoke API tokens: one named by its value or its 'cairn_<12 characters>' prefix, or "
        "every active token of a person (--user). Scripts using them are refused at once. "
        "Records an audit event per token; safe to run again."
    )

    def add_arguments(self, parser):
        parser.add_argument("token", nargs="?", help="the token, or its cairn_… prefix")
        parser.add_argument("--user", help="revoke every active token of this person")
        parser.add_argument("--reason", required=True, help="why, kept in the audit event")

    def handle(self, *args, token, user, reason, **options):
        if bool(token) == bool(user):
            raise CommandError("give either a token (its cairn_… prefix) or --user USERNAME")
        if user:
            owner = get_user_model().objects.filter(username=user).first()
            if owner is None:
                raise CommandError(f"no user named {user!r} (names are case-sensitive)")
            tokens = ApiToken.objects.filter(user=owner)
        else:
            tokens = ApiToken.objects.filter(lookup=lookup_of(token))
            if not tokens.exists():
                raise CommandError(
                    f"no API token {ApiToken.PREFIX}{lookup_of(token)}…; tokens are named by "
                    "the 12 characters after 'cairn_' (listed on the operator pages under "
                    "API tokens)")
        now = timezone.now()
        with transaction.atomic():
            for item in tokens.select_for_update().select_related("user"):
                if item.revoked_at is not None:
                    self.stdout.write(f"{item} of {item.user}: already revoked on "
                                      f"{item.revoked_at:%Y-%m-%d %H:%M} UTC; nothing to do")
                    continue
                item.revoked_at = now
                item.save(update_fields=["revoked_at"])
                record("token.revoked", target=item, summary=f"API token {item} of "
                       f"{item.user} revoked by an operator",
                       params={"user": item.user.username, "reason": reason})
                self.stdout.write(f"{item} of {item.user}: revoked")
        if user and not tokens.exists():
            self.stdout.write(f"{user} has no API token; nothing to do")
