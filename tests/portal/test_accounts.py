"""Operator set-up commands, log-in throttling, password change and API tokens."""

import pytest
from django.contrib.auth import get_user_model
from django.core.management import CommandError, call_command
from django.urls import reverse

from portal.accounts.models import ApiToken, Membership, Site, Study
from portal.audit.models import Event

pytestmark = pytest.mark.django_db


def run(*args):
    from io import StringIO

    out = StringIO()
    call_command(*args, stdout=out)
    return out.getvalue()


def test_setup_commands_are_idempotent_and_print_password_once():
    assert "created" in run("add_study", "rail", "--name", "Rail study")
    assert "already there" in run("add_study", "rail", "--name", "Rail study")
    run("add_site", "north", "--study", "rail", "--name", "North lab")
    run("add_site", "north", "--study", "rail", "--name", "North lab")
    first = run("add_member", "ana", "--site", "north", "--role", "data_manager")
    again = run("add_member", "ana", "--site", "north", "--role", "data_manager")
    assert "one-time password:" in first
    assert "one-time password" not in again
    password = first.split("one-time password: ")[1].split()[0]
    assert get_user_model().objects.get(username="ana").check_password(password)
    assert Study.objects.count() == 1 and Site.objects.count() == 1
    assert Membership.objects.filter(user__username="ana").count() == 1
    assert Event.objects.filter(verb="membership.changed").count() == 1


def test_renaming_a_study_or_site_is_recorded():
    run("add_study", "rail", "--name", "Rail study")
    run("add_site", "north", "--study", "rail", "--name", "North lab")
    run("add_study", "rail", "--name", "Rail workload study")
    run("add_site", "north", "--study", "rail", "--name", "Northern lab")
    renamed = {e.verb: e.params for e in Event.objects.filter(verb__endswith=".renamed")}
    assert renamed == {"study.renamed": {"from": "Rail study", "to": "Rail workload study"},
                       "site.renamed": {"from": "North lab", "to": "Northern lab"}}


@pytest.mark.parametrize("args, message", [
    (("add_site", "x", "--study", "nope", "--name", "X"), "unknown study 'nope'"),
    (("add_member", "u", "--site", "nope", "--role", "analyst"), "unknown site 'nope'"),
    (("add_member", "u", "--site", "north", "--role", "boss"), "unknown role 'boss'"),
    (("add_study", "bad slug!", "--name", "X"), "use letters, digits"),
])
def test_setup_commands_name_what_is_unknown(args, message):
    run("add_study", "rail", "--name", "Rail")
    run("add_site", "north", "--study", "rail", "--name", "North")
    with pytest.raises(CommandError, match=message):
        run(*args)


def test_login_is_throttled_per_account(client, settings, consortium):
    settings.LOGIN_MAX_FAILURES_PER_ACCOUNT = 3
    user = consortium["people"]["dm_a1"]
    user.set_password("right-password-123")
    user.save()
    url = reverse("accounts:login")
    for _ in range(3):
        response = client.post(url, {"username": "dm_a1", "password": "wrong"})
        assert response.status_code == 200
    response = client.post(url, {"username": "dm_a1", "password": "right-password-123"})
    assert "Too many failed log-ins" in response.content.decode()
    assert "_auth_user_id" not in client.session
    assert Event.objects.filter(verb="login.failed").count() == 3
    assert Event.objects.filter(verb="login.refused").count() == 1


def test_login_is_throttled_per_address(client, settings, consortium):
    settings.LOGIN_MAX_FAILURES_PER_ADDRESS = 4
    url = reverse("accounts:login")
    for n in range(4):
        client.post(url, {"username": f"guess{n}", "password": "x"})
    user = consortium["people"]["dm_a1"]
    user.set_password("right-password-123")
    user.save()
    response = client.post(url, {"username": "dm_a1", "password": "right-password-123"})
    assert "Too many failed log-ins" in response.content.decode()


def test_login_logout_and_password_change(client, consortium):
    user = consortium["people"]["dm_a1"]
    user.set_password("first-password-123")
    user.save()
    response = client.post(reverse("accounts:login"),
                           {"username": "dm_a1", "password": "first-password-123"})
    assert response.status_code == 302
    response = client.post(reverse("accounts:password_change"), {
        "old_password": "first-password-123", "new_password1": "a-new-long-passphrase-7",
        "new_password2": "a-new-long-passphrase-7",
    })
    assert response.status_code == 302
    user.refresh_from_db()
    assert user.check_password("a-new-long-passphrase-7")
    assert client.get(reverse("accounts:logout")).status_code == 405  # sign-out is a POST
    client.post(reverse("accounts:logout"))
    assert client.get(reverse("dashboard:home")).status_code == 302
    verbs = set(Event.objects.values_list("verb", flat=True))
    assert {"login", "password.changed", "logout"} <= verbs


def test_api_token_is_stored_hashed_and_authenticates(client, consortium):
    user = consortium["people"]["dm_a1"]
    token, raw = ApiToken.issue(user, "lab server")
    assert raw not in token.digest and len(token.digest) == 64
    assert not ApiToken.objects.filter(digest__contains=raw.split("_")[-1]).exists()
    response = client.get(reverse("api:me"), HTTP_AUTHORIZATION=f"Bearer {raw}")
    assert response.status_code == 200
    assert response.json()["visible_sites"] == ["a1"]
    assert client.get(reverse("api:me"), HTTP_AUTHORIZATION="Bearer cairn_nope_x").status_code \
        == 401
    token.refresh_from_db()
    assert token.last_used_at is not None
    client.force_login(user)
    client.post(reverse("accounts:revoke_token", args=[token.pk]))
    client.logout()
    assert client.get(reverse("api:me"), HTTP_AUTHORIZATION=f"Bearer {raw}").status_code == 401


def test_one_time_password_must_be_replaced_before_anything_else(client):
    run("add_study", "rail", "--name", "Rail")
    run("add_site", "north", "--study", "rail", "--name", "North")
    out = run("add_member", "ana", "--site", "north", "--role", "analyst")
    password = out.split("one-time password: ")[1].split()[0]
    client.post(reverse("accounts:login"), {"username": "ana", "password": password})
    response = client.get(reverse("dashboard:home"))
    assert response.status_code == 302 and response.url == reverse("accounts:password_change")
    client.post(reverse("accounts:password_change"), {
        "old_password": password, "new_password1": "my-own-long-phrase-42",
        "new_password2": "my-own-long-phrase-42"})
    assert client.get(reverse("dashboard:home")).status_code == 200
