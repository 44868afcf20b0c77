"""Refusing log-ins after too many recent failures for one account or from one address."""

from datetime import timedelta

from django.conf import settings
from django.utils import timezone

from portal.accounts.models import LoginFailure


def client_address(request):
    """The client's address as seen by Django (set a trusted proxy to pass the real one)."""
    return request.META.get("REMOTE_ADDR") or None


def _recent(now=None):
    return (now or timezone.now()) - timedelta(seconds=settings.LOGIN_FAILURE_WINDOW_S)


def is_throttled(username, address):
    since = _recent()
    by_account = LoginFailure.objects.filter(username__iexact=username, at__gte=since).count()
    if by_account >= settings.LOGIN_MAX_FAILURES_PER_ACCOUNT:
        return True
    if address:
        by_address = LoginFailure.objects.filter(address=address, at__gte=since).count()
        if by_address >= settings.LOGIN_MAX_FAILURES_PER_ADDRESS:
            return True
    return False


def note_failure(username, address):
    LoginFailure.objects.create(username=username[:150], address=address)


def clear_failures(username):
    LoginFailure.objects.filter(username__iexact=username).delete()
