"""Every URL × every role × four scopes of data, from the URL resolver.

The world: study A takes sites ``shared`` and ``a2``; study B takes ``b1`` and ``shared``
(one lab in two studies). Each person holds one role at ``shared`` *within study A*. The
four scopes of data they are tried against:

* ``own``: shared's data in study A;
* ``other-site``: a2's data in study A (study-wide roles see it, site roles do not);
* ``other-study``: b1's data in study B (nobody but the operator sees it);
* ``shared-other-study``: shared's data in study B — the same lab, another study: a role
  held for study A grants nothing here.

``RULES`` says what each URL needs; a URL pattern without an entry fails the suite, so a new
view cannot be added without deciding who may reach it. Refusals must be 403 or 404 and must
change nothing in the database.
"""

import json
from dataclasses import dataclass

import pytest
from django.apps import apps
from django.urls import reverse

from portal.accounts.models import ApiToken
from portal.accounts.setup import add_site, add_study
from tests.helpers import member
from tests.portal import objects
from tests.portal.test_permissions import walk

pytestmark = pytest.mark.django_db

SCOPES = ("own", "other-site", "other-study", "shared-other-study")
ROLES = ("data_manager", "analyst", "study_lead", "auditor", "operator")

#: What each role may do with data of each scope (operators: everything, everywhere).
ABILITIES = {
    "data_manager": {"own": {"view", "download", "upload", "run"}},
    "analyst": {"own": {"view", "download", "run"}},
    "study_lead": {"own": {"view", "download", "run", "lead"},
                   "other-site": {"view", "download", "run", "lead"}},
    "auditor": {"own": {"view", "download"}, "other-site": {"view", "download"}},
}


@dataclass(frozen=True)
class Rule:
    """``need``: view, download, upload, run or lead; ``method``: how the URL is used;
    ``level``: "object" (its arguments name objects of the scope), "study" (a study's page),
    "site" (a site's page: the shared lab's page is the same URL in both studies, so there the
    check is that nothing of study B shows), "account" (the person's own things) or
    "list" (no arguments: must show nothing of data the person may not see)."""

    need: str = "view"
    method: str = "get"
    level: str = "object"
    query: str = ""


RULES = {
    "accounts:login": Rule(level="public"),
    "accounts:logout": Rule(level="account"),
    "accounts:password_change": Rule(level="account"),
    "accounts:password_changed": Rule(level="account"),
    "accounts:tokens": Rule(level="account"),
    "accounts:time_zone": Rule(level="account"),
    "accounts:revoke_token": Rule(level="account", method="post"),
    "dashboard:home": Rule(level="list"),
    "dashboard:study": Rule(level="study"),
    "dashboard:site": Rule(level="site"),
    "studies:protocol": Rule(level="study"),
    "studies:protocol_edit": Rule(need="lead", level="study"),
    "datasets:upload_new": Rule(need="upload", level="site"),
    "datasets:upload": Rule(),
    "datasets:upload_status": Rule(),
    "datasets:upload_report": Rule(),
    "datasets:upload_confirm": Rule(need="upload", method="post"),
    "datasets:upload_cancel": Rule(need="upload", method="post"),
    "datasets:restore": Rule(need="upload"),
    "datasets:version": Rule(),
    "datasets:download_version": Rule(need="download"),
    "datasets:download_file": Rule(need="download"),
    "quality:version": Rule(),
    "quality:rerun": Rule(need="run", method="post"),
    "quality:round": Rule(),
    "quality:round_status": Rule(),
    "quality:derivative": Rule(need="download"),
    "quality:recording": Rule(),
    "quality:override": Rule(need="run", method="post"),
    "quality:plot": Rule(),
    "quality:signal": Rule(),
    "features:study": Rule(level="study"),
    "features:new": Rule(need="run", method="post", level="study"),
    "features:detail": Rule(),
    "features:summary": Rule(),
    "features:status": Rule(),
    "features:download": Rule(need="download"),
    "features:plot": Rule(),
    "training:study": Rule(level="study"),
    "training:new": Rule(need="run", method="post", level="study"),
    "training:compare": Rule(level="study"),
    "training:detail": Rule(),
    "training:summary": Rule(),
    "training:rerun": Rule(need="run", method="post"),
    "training:status": Rule(),
    "training:spec_diff": Rule(query="with"),
    "training:plot": Rule(),
    "training:approve": Rule(need="lead", method="post"),
    "training:withdraw": Rule(need="lead", method="post"),
    "training:releases": Rule(level="site"),
    "training:release_file": Rule(need="download"),
    "jobs:detail": Rule(),
    "jobs:progress": Rule(),
    "audit:events": Rule(level="list"),
    "audit:export": Rule(level="list"),
    "lineage:page": Rule(),
    "lineage:prov": Rule(),
    "lineage:derived": Rule(),
    "lineage:reproduce": Rule(need="run", method="post"),
    "api:me": Rule(level="list"),
    "api:job": Rule(),
    "api:uploads": Rule(need="upload", method="post", level="study"),
    "api:upload": Rule(),
    "api:upload_chunk": Rule(need="upload", method="put"),
    "api:upload_finish": Rule(need="upload", method="post"),
    "api:upload_confirm": Rule(need="upload", method="post"),
    "api:training": Rule(need="run", method="post", level="study"),
    "api:training_run": Rule(),
    "api:openapi": Rule(level="public"),
    "api:studies": Rule(level="list"),
    "api:sites": Rule(level="list"),
    "api:versions": Rule(level="list"),
    "api:version": Rule(),
    "api:version_download": Rule(need="download"),
    "api:quality_rounds": Rule(level="list"),
    "api:quality_round": Rule(),
    "api:quality_results": Rule(),
    "api:quality_derivative": Rule(need="download"),
    "api:quality_result": Rule(),
    "api:feature_sets": Rule(level="list"),
    "api:feature_set": Rule(),
    "api:feature_set_download": Rule(need="download"),
    "api:training_runs": Rule(level="list"),
    "api:training_run_detail": Rule(),
    "api:releases": Rule(level="list"),
    "api:release": Rule(),
    "api:release_download": Rule(need="download"),
}

#: Kinds the lineage and "made from this" pages take, each tried in every scope.
LINEAGE_KINDS = ("training", "release", "features", "version")
DERIVED_KINDS = ("upload", "version", "recording", "qc", "features", "training")


@pytest.fixture
def world(db):
    study_a, _ = add_study("study-a", name="Study A")
    study_b, _ = add_study("study-b", name="Study B")
    shared, _ = add_site("shared", study_slug="study-a", name="Shared lab")
    add_site("shared", study_slug="study-b", name="Shared lab")
    a2, _ = add_site("a2", study_slug="study-a", name="Site A2")
    b1, _ = add_site("b1", study_slug="study-b", name="Site B1")
    people = {role: member(f"{role}-shared-a", role=role, site_slug="shared",
                           study_slug="study-a")[0] for role in ROLES if role != "operator"}
    people["operator"] = member("root", role="operator")[0]
    # the people whose data the scopes hold (uploaders of the other sites and study)
    owners = {"own": people["data_manager"],
              "other-site": member("dm-a2", role="data_manager", site_slug="a2")[0],
              "other-study": member("dm-b1", role="data_manager", site_slug="b1")[0],
              "shared-other-study": member("dm-shared-b", role="data_manager",
                                           site_slug="shared", study_slug="study-b")[0]}
    where = {"own": (shared, study_a), "other-site": (a2, study_a),
             "other-study": (b1, study_b), "shared-other-study": (shared, study_b)}
    data = {scope: objects.fill(site, study, owner=owners[scope], label=f"data-{scope}")
            for scope, (site, study) in where.items()}
    for scope, (site, study) in where.items():
        data[scope]["site"], data[scope]["study"] = site, study
    return {"people": people, "data": data}


def _allowed(role, scope, need):
    if role == "operator":
        return True
    return need in ABILITIES[role].get(scope, set())


def _counts():
    skip = {"sessions.session", "audit.event", "audit.pendinglink", "audit.chainlink",
            "audit.chainhead", "accounts.loginfailure", "accounts.apitoken"}
    return {m._meta.label_lower: m.objects.count() for m in apps.get_models()
            if m._meta.label_lower not in skip}


def _body(response):
    if response.streaming:
        return b"".join(response.streaming_content).decode(errors="replace")
    return response.content.decode(errors="replace")


def _variants(name, data):
    """(URL, extra POST data) for each way the URL names objects of one scope."""
    pattern = dict(walk())[name]
    keys = list(pattern.pattern.converters)
    rule = RULES[name]
    kwargs = {k: data[k] for k in keys}
    if name in ("lineage:page", "lineage:prov"):
        choices = [{"lineage_kind": kind, "object_id": data["objects"][kind].pk}
                   for kind in LINEAGE_KINDS]
    elif name == "lineage:derived":
        choices = [{"lineage_kind": kind, "object_id": data["objects"][kind].pk}
                   for kind in DERIVED_KINDS]
    elif name in ("jobs:detail", "jobs:progress", "api:job"):
        choices = [{"job_id": job} for job in data["jobs"].values()]
    elif name == "lineage:reproduce":
        choices = [{"subject_kind": "features", "object_id": data["set_id"]},
                   {"subject_kind": "qc", "object_id": data["run_id"]}]
    else:
        choices = [kwargs]
    query = f"?with={data['training_id']}" if rule.query == "with" else ""
    return [reverse(name, kwargs=choice) + query for choice in choices]


def _post_data(name, data):
    """Form or JSON fields naming the scope's objects, for the study-level write URLs."""
    if name == "features:new":
        return {"sites": [data["site_slug"]], "window_s": "2"}
    if name == "training:new":
        return {"feature_set": str(data["set_id"])}
    if name == "api:uploads":
        return json.dumps({"site": data["site_slug"], "study": data["study_slug"],
                           "mode": "snapshot", "filename": "x.zip", "size": 10})
    if name == "api:training":
        return json.dumps({"feature_set": data["set_id"], "label": {"kind": "level"}})
    if name == "api:upload_finish":
        return json.dumps({"sha256": "0" * 64})
    if name == "quality:override":
        return {"channel": "Cz", "status": "bad", "reason": "matrix test"}
    return {}


def _call(client, name, url, data, headers):
    rule = RULES[name]
    if rule.method == "get":
        return client.get(url, **headers)
    body = _post_data(name, data)
    if isinstance(body, str):
        return getattr(client, rule.method)(url, body, content_type="application/json",
                                            **headers)
    if rule.method == "put":
        return client.put(url, b"0123456789", content_type="application/octet-stream",
                          **headers)
    return client.post(url, body, **headers)


def _as(client, user, name):
    """Headers for the request: API URLs are called with a token, pages with a session."""
    if name.startswith("api:"):
        client.logout()
        _, raw = ApiToken.issue(user, "matrix") if not hasattr(user, "_raw") else (None,
                                                                                  user._raw)
        user._raw = raw
        return {"HTTP_AUTHORIZATION": f"Bearer {raw}"}
    client.force_login(user)
    return {}


def test_every_url_has_a_rule():
    names = {name for name, _ in walk()}
    missing = sorted(names - RULES.keys())
    assert not missing, f"URLs without an entry in RULES (decide who may reach them): {missing}"
    stale = sorted(RULES.keys() - names)
    assert not stale, f"RULES names URLs that no longer exist: {stale}"


@pytest.mark.parametrize("role", ROLES)
def test_access_matrix(client, world, role):
    user = world["people"][role]
    client.raise_request_exception = False  # a crash is a 500 here, counted and reported
    checked, leaks = 0, []
    for name, rule in sorted(RULES.items()):
        if rule.level in ("public", "account", "list"):
            continue
        for scope in SCOPES:
            data = world["data"][scope]
            allowed = _allowed(role, scope, rule.need)
            if rule.level == "study" and rule.need == "view":
                # reading a study's pages: whether the role reaches the study at all
                allowed = role == "operator" or scope in ("own", "other-site")
            for url in _variants(name, data):
                headers = _as(client, user, name)
                before = _counts()
                response = _call(client, name, url, data, headers)
                status = response.status_code
                if status == 302 and rule.method == "get" and allowed:
                    status = client.get(response.url, **headers).status_code
                checked += 1
                if rule.level == "site" and scope == "shared-other-study" and \
                        role != "operator":
                    # the shared lab's page is reachable through study A; study B's data
                    # must not show on it
                    if status == 200 and "data-shared-other-study" in _body(response):
                        leaks.append(f"{role} sees study B data on {url}")
                    continue
                if allowed:
                    if rule.method == "get":
                        if status != 200:
                            leaks.append(f"{role} cannot read {url} ({scope}): {status}")
                    elif status in (403, 404) or status >= 500:
                        leaks.append(f"{role} refused {rule.method} {url} ({scope}): "
                                     f"{status}")
                else:
                    after = _counts()
                    if status not in (400, 403, 404, 405) or (
                            status == 400 and rule.level != "study"):
                        leaks.append(f"{role} {rule.method} {url} ({scope}) gave {status}")
                    elif after != before:
                        changed = {k for k in after if after[k] != before[k]}
                        leaks.append(f"{role} {rule.method} {url} ({scope}) changed {changed}")
    assert checked > 200
    assert not leaks, f"{len(leaks)} of {checked} requests wrong:\n" + "\n".join(leaks)


@pytest.mark.parametrize("role", ROLES)
def test_lists_show_only_reachable_data(client, world, role):
    """Pages without arguments (home, audit trail, its CSV, api/me) name nothing of data the
    person may not see."""
    user = world["people"][role]
    hidden = [f"data-{scope}" for scope in SCOPES if not _allowed(role, scope, "view")]
    for name, rule in RULES.items():
        if rule.level != "list":
            continue
        headers = _as(client, user, name)
        response = client.get(reverse(name), **headers)
        assert response.status_code == 200, name
        body = _body(response)
        for marker in hidden:
            assert marker not in body, f"{role} sees {marker} on {name}"
        if role != "operator":
            assert "Study B" not in body and "study-b" not in body, f"{role}: {name}"


def test_matrix_size(world):
    """The matrix covers every URL pattern with arguments, in every scope, for every role."""
    with_args = [name for name, rule in RULES.items()
                 if rule.level not in ("public", "account", "list")]
    requests = sum(len(_variants(name, world["data"]["own"])) for name in with_args)
    print(f"\naccess matrix: {len(RULES)} URL patterns, {len(with_args)} with object, site or "
          f"study arguments -> {requests} URL variants x {len(SCOPES)} scopes x {len(ROLES)} "
          f"roles = {requests * len(SCOPES) * len(ROLES)} requests")
    assert len(with_args) >= 45
    assert requests * len(SCOPES) * len(ROLES) > 1000
