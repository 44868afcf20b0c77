"""Who may see and do what, checked on every URL the portal serves.

The URL patterns are walked from Django's resolver, so a new view that forgets its permission
check (or a URL argument this test cannot fill) fails here.
"""

import pytest
from django.apps import apps
from django.urls import URLPattern, URLResolver, get_resolver, reverse

from tests.portal import objects

pytestmark = pytest.mark.django_db


def walk(resolver=None, namespace=None):
    """(namespaced name, pattern) for every URL pattern, following includes."""
    resolver = resolver or get_resolver()
    for entry in resolver.url_patterns:
        if isinstance(entry, URLResolver):
            ns = entry.namespace or namespace
            if ns == "admin":
                continue  # Django's admin: its own staff check, tested below
            yield from walk(entry, ns)
        elif isinstance(entry, URLPattern):
            yield (f"{namespace}:{entry.name}" if namespace else entry.name), entry


def fill(consortium, site_key, study_key):
    """URL arguments naming objects of the given site and study."""
    site = consortium["sites"][site_key]
    study = site.studies.get(slug=study_key)
    owner = {"a1": "dm_a1", "a2": "dm_a2", "b1": "dm_b1"}[site_key]
    return objects.fill(site, study, owner=consortium["people"][owner],
                        label=site_key)


def urls_for(kwargs_source):
    for name, pattern in walk():
        keys = list(pattern.pattern.converters)
        missing = [k for k in keys if k not in kwargs_source]
        assert not missing, f"{name}: this test cannot fill URL argument(s) {missing}; add them"
        yield name, pattern, reverse(name, kwargs={k: kwargs_source[k] for k in keys})


def test_every_view_declares_its_access_rule():
    for name, pattern in walk():
        rule = getattr(pattern.callback, "cairn_access", None)
        assert rule in {"public", "account", "checked"}, (
            f"view {name} has no access rule: wrap it with portal.accounts.permissions.access"
        )


def test_data_manager_of_one_site_reaches_nothing_of_another(client, consortium):
    other = fill(consortium, "b1", "study-b")
    client.force_login(consortium["people"]["dm_a1"])
    checked = 0
    for name, pattern, url in urls_for(other):
        rule = pattern.callback.cairn_access
        if rule == "public" or not pattern.pattern.converters:
            continue
        for method in ("get", "post", "put"):
            status = getattr(client, method)(url).status_code
            assert status in (403, 404, 405), f"{method.upper()} {url} ({name}) gave {status}"
        checked += 1
    assert checked >= 6


def test_lists_show_nothing_of_another_site(client, consortium):
    fill(consortium, "b1", "study-b")
    client.force_login(consortium["people"]["dm_a1"])
    for name, pattern in walk():
        if pattern.callback.cairn_access != "checked" or pattern.pattern.converters:
            continue
        url = reverse(name)
        response = client.get(url)
        body = (b"".join(response.streaming_content) if response.streaming
                else response.content).decode()
        assert "Site B1" not in body and "b1.zip" not in body and "study-b" not in body, name


def test_study_lead_sees_every_site_of_their_study_and_none_of_another(client, consortium):
    fill(consortium, "a2", "study-a")
    client.force_login(consortium["people"]["lead_a"])
    body = client.get(reverse("dashboard:study", args=["study-a"])).content.decode()
    assert "Site A1" in body and "Site A2" in body and "a2.zip" in body
    assert client.get(reverse("dashboard:site", args=["a2"])).status_code == 200
    assert client.get(reverse("dashboard:study", args=["study-b"])).status_code == 404
    assert client.get(reverse("dashboard:site", args=["b1"])).status_code == 404


def _counts():
    skip = {"sessions.session", "audit.event", "audit.pendinglink", "audit.chainlink",
            "audit.chainhead", "accounts.loginfailure"}
    return {m._meta.label_lower: m.objects.count() for m in apps.get_models()
            if m._meta.label_lower not in skip}


#: Pages that exist only to change something: an auditor is refused even the form.
WRITE_ONLY = {"studies:protocol_edit", "datasets:upload_new", "api:uploads",
              "api:upload_chunk", "api:upload_finish", "quality:rerun", "quality:override",
              "features:new", "training:new", "training:rerun", "training:approve",
              "training:withdraw", "api:training", "lineage:reproduce",
              "datasets:upload_confirm", "datasets:upload_cancel", "datasets:restore",
              "api:upload_confirm"}


def test_auditor_reads_everything_of_their_study_and_writes_nothing(client, consortium):
    own = fill(consortium, "a1", "study-a")
    auditor = consortium["people"]["auditor_a"]
    client.force_login(auditor)
    for name, pattern, url in urls_for(own):
        rule = pattern.callback.cairn_access
        if rule != "checked":
            continue
        response = client.get(url)
        status = response.status_code
        if status == 302 and name not in WRITE_ONLY:  # e.g. a version's quality → its round
            status = client.get(response.url).status_code
        if name in WRITE_ONLY:
            assert status in (403, 405), f"GET {url} ({name}) gave {status} to an auditor"
        else:
            assert status == 200, f"auditor cannot read {url} ({name}): {status}"
        for method in ("post", "put"):
            before = _counts()
            status = getattr(client, method)(url, {"note": "x", "tasks": "rest"}).status_code
            assert _counts() == before, f"{method.upper()} {url} ({name}) changed data"
            assert status in (200, 302, 403, 405), f"{method.upper()} {url} ({name}) gave {status}"


def test_admin_pages_are_for_operators_only(client, consortium):
    client.force_login(consortium["people"]["lead_a"])
    assert client.get(reverse("admin:index")).status_code == 302
    client.force_login(consortium["people"]["operator"])
    assert client.get(reverse("admin:index")).status_code == 200


def test_signed_out_visitors_are_sent_to_log_in(client, consortium):
    own = fill(consortium, "a1", "study-a")
    for name, pattern, url in urls_for(own):
        if pattern.callback.cairn_access == "public":
            continue
        status = client.get(url).status_code
        assert status in (302, 401), f"{url} ({name}) answered {status} to a signed-out visitor"
