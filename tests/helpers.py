"""Small helpers shared by the test modules (importable without Django set up)."""

import datetime

#: When pyedflib's test recording is said to start, in its BIDS wrapper (conftest).
PYEDFLIB_MEAS_DATE = datetime.datetime(2011, 4, 4, 12, 57, 2, tzinfo=datetime.UTC)


def member(username, *, role, site_slug=None):
    """A person with a role, already past their one-time password (as after first log-in)."""
    from portal.accounts.models import AccountFlags
    from portal.accounts.setup import add_member

    user, password = add_member(username, role=role, site_slug=site_slug)
    AccountFlags.require_new_password(user, required=False)
    return user, password
