"""Throttled log-ins: one audit event per (account or address, window), and the client's
address taken only from proxies the operator said to trust."""

import subprocess
import sys
from datetime import timedelta

import pytest
from django.test import RequestFactory
from django.urls import reverse

from portal.accounts import throttle
from portal.accounts.models import LoginFailure, LoginRefusal
from portal.audit.models import Event

pytestmark = pytest.mark.django_db


def post_login(client, username, password="wrong-password", **headers):
    return client.post(reverse("accounts:login"), {"username": username, "password": password},
                       **headers)


def test_fifty_refused_log_ins_in_one_window_make_one_event(client, settings, consortium):
    settings.LOGIN_MAX_FAILURES_PER_ACCOUNT = 3
    user = consortium["people"]["dm_a1"]
    user.set_password("right-password-123")
    user.save()
    for _ in range(3):
        post_login(client, "dm_a1")
    for n in range(50):
        password = "right-password-123" if n % 2 else "wrong-password"
        response = post_login(client, "DM_a1" if n % 3 else "dm_a1", password)
        assert "Too many failed log-ins" in response.content.decode()
    assert "_auth_user_id" not in client.session
    assert Event.objects.filter(verb="login.failed").count() == 3
    refused = Event.objects.filter(verb="login.refused")
    assert refused.count() == 1
    event = refused.get()
    assert event.params["throttled_by"] == "account" and event.params["failures"] == 3
    assert event.params["username"] == "dm_a1"
    counter = LoginRefusal.objects.get()
    assert counter.key == "account:dm_a1" and counter.count == 50


def test_guessing_many_accounts_from_one_address_makes_one_event(client, settings, consortium):
    settings.LOGIN_MAX_FAILURES_PER_ADDRESS = 4
    for n in range(4):
        post_login(client, f"guess{n}")
    for n in range(30):
        assert "Too many" in post_login(client, f"other{n}").content.decode()
    event = Event.objects.get(verb="login.refused")
    assert event.params["throttled_by"] == "address"
    assert event.params["address"] == "127.0.0.1"
    assert LoginRefusal.objects.get(key="address:127.0.0.1").count == 30


def test_a_new_window_makes_a_new_event_that_counts_the_last_one(settings, consortium,
                                                                 monkeypatch):
    settings.LOGIN_FAILURE_WINDOW_S = 900
    settings.LOGIN_MAX_FAILURES_PER_ACCOUNT = 2
    from django.utils import timezone

    start = throttle.window_start(timezone.now())
    late = start + timedelta(seconds=890)  # 10 s before the next window
    for _ in range(2):
        LoginFailure.objects.create(username="dm_a1", address="192.0.2.1",
                                    at=late - timedelta(seconds=5))
    for moment, times in ((late, 7), (late + timedelta(seconds=20), 3)):
        monkeypatch.setattr(throttle.timezone, "now", lambda moment=moment: moment)
        for _ in range(times):
            assert throttle.refuse_if_throttled("dm_a1", "192.0.2.1")
    events = list(Event.objects.filter(verb="login.refused").order_by("pk"))
    assert len(events) == 2
    assert events[0].params["refused_in_previous_window"] == 0
    assert events[1].params["refused_in_previous_window"] == 7
    assert sorted(LoginRefusal.objects.values_list("count", flat=True)) == [3, 7]


def address(settings, proxies, remote, forwarded=None):
    settings.TRUSTED_PROXIES = proxies
    extra = {"REMOTE_ADDR": remote}
    if forwarded is not None:
        extra["HTTP_X_FORWARDED_FOR"] = forwarded
    return throttle.client_address(RequestFactory().get("/", **extra))


@pytest.mark.parametrize("proxies, remote, forwarded, expected", [
    (0, "198.51.100.9", "203.0.113.66", "198.51.100.9"),            # header ignored
    (0, "198.51.100.9", None, "198.51.100.9"),
    (1, "10.0.0.2", "203.0.113.66, 198.51.100.4", "198.51.100.4"),  # right-most
    (1, "10.0.0.2", "198.51.100.4", "198.51.100.4"),
    (2, "10.0.0.3", "203.0.113.66, 198.51.100.4, 10.0.0.2", "198.51.100.4"),
    (2, "10.0.0.3", "198.51.100.4", "10.0.0.3"),                     # shorter than 2
    (1, "10.0.0.2", None, "10.0.0.2"),                               # no header
    (1, "10.0.0.2", "203.0.113.66, not-an-address", "10.0.0.2"),     # malformed
    (1, "10.0.0.2", "198.51.100.4:5000", "10.0.0.2"),                # a port is no address
    (1, "10.0.0.2", "2001:DB8::0:1", "2001:db8::1"),                 # normalised
    (0, "", None, None),
])
def test_the_client_address_comes_from_trusted_proxies_only(settings, proxies, remote,
                                                           forwarded, expected):
    """Each proxy appends the address it was reached from, so with N trusted proxies the
    client is the N-th entry from the right; entries further left are whatever the client
    sent. Rule as MDN's X-Forwarded-For page describes it (from memory)."""
    assert address(settings, proxies, remote, forwarded) == expected


def test_a_spoofed_forwarded_header_does_not_escape_the_address_throttle(client, settings,
                                                                        consortium):
    settings.LOGIN_MAX_FAILURES_PER_ADDRESS = 4
    assert settings.TRUSTED_PROXIES == 0
    for n in range(4):
        post_login(client, f"guess{n}", HTTP_X_FORWARDED_FOR=f"203.0.113.{n}")
    response = post_login(client, "guess9", HTTP_X_FORWARDED_FOR="203.0.113.99")
    assert "Too many failed log-ins" in response.content.decode()
    assert set(LoginFailure.objects.values_list("address", flat=True)) == {"127.0.0.1"}


def test_behind_one_proxy_the_right_most_address_is_recorded(client, settings, consortium):
    settings.TRUSTED_PROXIES = 1
    user = consortium["people"]["dm_a1"]
    user.set_password("right-password-123")
    user.save()
    post_login(client, "dm_a1", REMOTE_ADDR="10.0.0.2",
               HTTP_X_FORWARDED_FOR="203.0.113.66, 198.51.100.4")
    assert LoginFailure.objects.get().address == "198.51.100.4"
    post_login(client, "dm_a1", "right-password-123", REMOTE_ADDR="10.0.0.2",
               HTTP_X_FORWARDED_FOR="203.0.113.66, 198.51.100.4")
    assert Event.objects.get(verb="login").params["address"] == "198.51.100.4"


@pytest.mark.parametrize("value", ["-1", "one", "1.5"])
def test_a_wrong_number_of_trusted_proxies_stops_the_portal(tmp_path, value):
    result = subprocess.run(
        [sys.executable, "-c", "import portal.settings"], capture_output=True, text=True,
        env={"CAIRN_TRUSTED_PROXIES": value, "CAIRN_VAR_DIR": str(tmp_path),
             "PATH": "/usr/bin:/bin"}, check=False)
    assert result.returncode != 0
    assert "CAIRN_TRUSTED_PROXIES must be a whole number" in result.stderr
