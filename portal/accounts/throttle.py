"""Refusing log-ins after too many recent failures for one account or from one address.

Refusals are counted per (account or address, window) in ``LoginRefusal`` rows; only the
first refusal of a window writes an audit event, so guessing at speed cannot flood the
audit trail. The client's address comes from :func:`client_address`, the one place that
reads it.
"""

import ipaddress
from datetime import UTC, datetime, timedelta

from django.conf import settings
from django.db import transaction
from django.db.models import F
from django.utils import timezone

from portal.accounts.models import LoginFailure, LoginRefusal
from portal.audit.events import record


def _ip(text):
    """``text`` as a normalised IP address, or None if it is not one."""
    try:
        return str(ipaddress.ip_address((text or "").strip()))
    except ValueError:
        return None


def client_address(request):
    """The client's IP address.

    With ``CAIRN_TRUSTED_PROXIES`` = 0 (the default) it is REMOTE_ADDR and X-Forwarded-For is
    ignored, since any client can send that header. With N trusted proxies in front, each
    appending the address it was reached from, it is the N-th address from the right of
    X-Forwarded-For; a header with fewer entries or no IP address there gives REMOTE_ADDR.
    """
    remote = _ip(request.META.get("REMOTE_ADDR"))
    hops = settings.TRUSTED_PROXIES
    if hops <= 0:
        return remote
    forwarded = request.META.get("HTTP_X_FORWARDED_FOR", "").split(",")
    if len(forwarded) < hops:
        return remote
    return _ip(forwarded[-hops]) or remote


def _recent(now=None):
    return (now or timezone.now()) - timedelta(seconds=settings.LOGIN_FAILURE_WINDOW_S)


def _throttle(username, address):
    """(what is throttled: "account" or "address", its recent failures), or None."""
    since = _recent()
    by_account = LoginFailure.objects.filter(username__iexact=username, at__gte=since).count()
    if by_account >= settings.LOGIN_MAX_FAILURES_PER_ACCOUNT:
        return "account", by_account
    if address:
        by_address = LoginFailure.objects.filter(address=address, at__gte=since).count()
        if by_address >= settings.LOGIN_MAX_FAILURES_PER_ADDRESS:
            return "address", by_address
    return None


def window_start(now):
    """The start of the fixed window of LOGIN_FAILURE_WINDOW_S seconds that holds ``now``."""
    width = settings.LOGIN_FAILURE_WINDOW_S
    return datetime.fromtimestamp(now.timestamp() // width * width, tz=UTC)


def refuse_if_throttled(username, address):
    """True if this log-in must be refused. Counts the refusal; the first one of a window
    for the account (or address) also writes a ``login.refused`` event."""
    found = _throttle(username, address)
    if found is None:
        return False
    by, failures = found
    key = f"account:{username.lower()}"[:200] if by == "account" else f"address:{address}"
    now = timezone.now()
    start = window_start(now)
    with transaction.atomic():
        row, created = LoginRefusal.objects.get_or_create(
            key=key, window_start=start, defaults={"last_at": now})
        if not created:
            LoginRefusal.objects.filter(pk=row.pk).update(count=F("count") + 1, last_at=now)
            return True
        before = LoginRefusal.objects.filter(
            key=key, window_start=start - timedelta(seconds=settings.LOGIN_FAILURE_WINDOW_S)
        ).values_list("count", flat=True).first()
        record("login.refused",
               summary=f"log-ins for {username!r} refused: too many failures by {by}; further "
                       "refusals in this window are counted, not recorded one by one",
               params={"username": username, "address": address, "throttled_by": by,
                       "failures": failures, "window_start": start.isoformat(),
                       "window_s": settings.LOGIN_FAILURE_WINDOW_S,
                       "refused_in_previous_window": before or 0})
    return True


def note_failure(username, address):
    LoginFailure.objects.create(username=username[:150], address=address)


def clear_failures(username):
    LoginFailure.objects.filter(username__iexact=username).delete()
