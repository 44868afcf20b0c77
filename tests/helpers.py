"""Small helpers shared by the test modules."""

from portal.accounts.models import AccountFlags
from portal.accounts.setup import add_member


def member(username, *, role, site_slug=None):
    """A person with a role, already past their one-time password (as after first log-in)."""
    user, password = add_member(username, role=role, site_slug=site_slug)
    AccountFlags.require_new_password(user, required=False)
    return user, password
