"""The read API for scripts: lists with cursors and filters, details, downloads, and tokens
with an expiry and a read-only scope. Invented objects (tests/portal/objects.py), plumbing
only: the sha256 checks compare with hashlib over the bytes received, and the zip is read with
the standard library's zipfile."""

import datetime
import hashlib
import io
import zipfile

import pytest
from django.urls import reverse
from django.utils import timezone

from portal.accounts.models import ApiToken
from portal.api_lists import MAX_LIMIT, make_cursor
from portal.audit.models import Event
from portal.datasets.models import DatasetVersion, Upload, VersionFile
from tests.portal import objects

pytestmark = pytest.mark.django_db


@pytest.fixture
def quick_passwords(settings):
    """Nobody here logs in with a password: the fast hasher saves ~0.5 s per person made."""
    settings.PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher"]


@pytest.fixture
def world(quick_passwords, consortium):
    """a1 and a2 in study A, b1 in study B, each with one of every object."""
    data = {}
    for key in ("a1", "a2", "b1"):
        site = consortium["sites"][key]
        data[key] = objects.fill(site, site.studies.get(), owner=None, label=f"data-{key}")
    return {"people": consortium["people"], "data": data, "sites": consortium["sites"]}


def bearer(user, **kwargs):
    _, raw = ApiToken.issue(user, "script", **kwargs)
    return {"HTTP_AUTHORIZATION": f"Bearer {raw}"}


def get(client, name, auth, *args, query=""):
    return client.get(reverse(f"api:{name}", args=args) + query, **auth)


def ids(response):
    assert response.status_code == 200, response.content[:300]
    return [row.get("id", row.get("slug")) for row in response.json()["results"]]


def error(response, status, field=None):
    assert response.status_code == status, response.content[:300]
    body = response.json()
    assert set(body) >= {"error", "field", "status", "code"} and body["status"] == status
    assert body["error"].strip()
    if field is not None:
        assert body["field"] == field, body
    return body


def streamed(response):
    assert response.status_code == 200, getattr(response, "content", b"")[:300]
    content = b"".join(response.streaming_content) if response.streaming else response.content
    return content


# --- what a token sees -----------------------------------------------------------------------

LISTS = ("versions", "quality_rounds", "feature_sets", "training_runs", "releases")


def test_an_analyst_lists_only_their_site_in_their_study(client, world):
    """analyst_a1 holds a role at a1 in study A: a2 (same study) and b1 (study B) are hidden,
    as on the web pages."""
    auth = bearer(world["people"]["analyst_a1"])
    a1 = world["data"]["a1"]
    expected = {"versions": [a1["version_id"]], "quality_rounds": [a1["round_id"]],
                "feature_sets": [a1["set_id"]], "training_runs": [a1["training_id"]],
                "releases": [a1["release_id"]]}
    for name in LISTS:
        assert ids(get(client, name, auth)) == expected[name], name
    assert ids(get(client, "studies", auth)) == ["study-a"]
    assert get(client, "studies", auth).json()["results"][0]["sites"] == ["a1"]
    assert ids(get(client, "sites", auth)) == ["a1"]
    # the study lead of A sees both sites of A, never B
    lead = bearer(world["people"]["lead_a"])
    assert sorted(ids(get(client, "versions", lead))) == sorted(
        [world["data"]["a1"]["version_id"], world["data"]["a2"]["version_id"]])
    assert ids(get(client, "sites", lead)) == ["a2", "a1"]


def test_objects_of_another_site_or_study_are_404_like_the_web(client, world):
    auth = bearer(world["people"]["analyst_a1"])
    for key in ("a2", "b1"):
        d = world["data"][key]
        for name, args in (("version", [d["version_id"]]),
                           ("version_download", [d["version_id"]]),
                           ("quality_round", [d["round_id"]]),
                           ("quality_results", [d["round_id"]]),
                           ("quality_derivative", [d["round_id"]]),
                           ("quality_result", [d["run_id"]]),
                           ("feature_set", [d["set_id"]]),
                           ("feature_set_download", [d["set_id"]]),
                           ("training_run_detail", [d["training_id"]]),
                           ("release", [d["release_id"]]),
                           ("release_download", [d["release_id"], "model"])):
            error(get(client, name, auth, *args), 404)
    client.force_login(world["people"]["analyst_a1"])  # the web page answers the same
    assert client.get(reverse("datasets:version", args=[world["data"]["a2"]["version_id"]])
                      ).status_code == 404


def test_an_unapproved_release_is_the_study_leads_only(client, world):
    """As on the sites' release pages (portal/training/access.py): a pending release is
    listed and downloadable for the study's lead, not for the site's analyst."""
    from portal.training.models import ModelRelease

    release = ModelRelease.objects.get(pk=world["data"]["a1"]["release_id"])
    release.state = "pending"
    release.save(update_fields=["state"])
    analyst = bearer(world["people"]["analyst_a1"])
    assert ids(get(client, "releases", analyst)) == []
    error(get(client, "release", analyst, release.pk), 404)
    error(get(client, "release_download", analyst, release.pk, "model"), 404)
    lead = bearer(world["people"]["lead_a"])
    assert release.pk in ids(get(client, "releases", lead))
    body = streamed(get(client, "release_download", lead, release.pk, "model"))
    assert hashlib.sha256(body).hexdigest() == release.model_sha256


# --- pages -----------------------------------------------------------------------------------

def more_versions(site, study, count):
    out = []
    for _ in range(count):
        number = DatasetVersion.objects.filter(site=site, study=study).count() + 1
        upload = Upload.objects.create(site=site, study=study, source="test",
                                       label=f"v{number}.zip", state="accepted")
        out.append(DatasetVersion.objects.create(site=site, study=study, number=number,
                                                 upload=upload,
                                                 manifest_sha256=f"{number:064x}").pk)
    return out


def walk(client, auth, query, site, study):
    url = reverse("api:versions") + query
    seen, pages = [], 0
    while url:
        response = client.get(url, **auth)
        seen += ids(response)
        url = response.json()["next"]
        pages += 1
        if pages == 1:
            # written meanwhile: a newer object never enters a walk already begun
            more_versions(site, study, 1)
    return seen, pages


def test_cursor_pages_are_stable_and_complete(client, world):
    site = world["sites"]["a1"]
    study = site.studies.get()
    made = more_versions(site, study, 6)
    auth = bearer(world["people"]["analyst_a1"])
    before = sorted([world["data"]["a1"]["version_id"], *made], reverse=True)
    seen, pages = walk(client, auth, "?limit=2", site, study)
    assert seen == before and pages == 4  # 7 versions, 2 a page, newest first, none twice
    first = get(client, "versions", auth, query="?limit=3").json()
    assert len(first["results"]) == 3 and first["limit"] == 3
    assert first["next"].startswith("/api/v1/versions/?")  # a path on the same server
    assert "cursor=" in first["next"] and "limit=3" in first["next"]


def test_limit_bounds_and_bad_cursors_answer_the_one_error_shape(client, world):
    auth = bearer(world["people"]["analyst_a1"])
    assert get(client, "versions", auth, query=f"?limit={MAX_LIMIT}").status_code == 200
    for bad in (MAX_LIMIT + 1, 0, -1, "ten"):
        body = error(get(client, "versions", auth, query=f"?limit={bad}"), 400, "limit")
        assert str(MAX_LIMIT) in body["error"]
    error(get(client, "versions", auth, query="?cursor=not-a-cursor"), 400, "cursor")
    forged = make_cursor("versions", 5)[:-2] + "xx"
    error(get(client, "versions", auth, query=f"?cursor={forged}"), 400, "cursor")
    elsewhere = make_cursor("releases", 10**6)
    body = error(get(client, "versions", auth, query=f"?cursor={elsewhere}"), 400, "cursor")
    assert "next" in body["error"]


def test_filters(client, world):
    lead = bearer(world["people"]["lead_a"])
    a1, a2 = world["data"]["a1"], world["data"]["a2"]
    assert ids(get(client, "versions", lead, query="?site=a2")) == [a2["version_id"]]
    assert ids(get(client, "versions", lead, query="?study=study-b")) == []  # not seen
    assert ids(get(client, "feature_sets", lead, query="?site=a1&state=done")) == [a1["set_id"]]
    assert ids(get(client, "feature_sets", lead, query="?state=failed")) == []
    assert ids(get(client, "releases", lead, query="?site=a2")) == [a2["release_id"]]
    assert ids(get(client, "quality_rounds", lead,
                   query=f"?version={a1['version_id']}")) == [a1["round_id"]]
    assert ids(get(client, "sites", lead, query="?study=study-b")) == []
    tomorrow = (timezone.now() + datetime.timedelta(days=1)).date().isoformat()
    assert ids(get(client, "training_runs", lead, query=f"?created_after={tomorrow}")) == []
    assert len(ids(get(client, "training_runs", lead,
                       query=f"?created_before={tomorrow}"))) == 2
    results = get(client, "quality_results", lead, a1["round_id"], query="?state=pass")
    assert ids(results) == [a1["run_id"]]
    assert ids(get(client, "quality_results", lead, a1["round_id"], query="?state=fail")) == []
    error(get(client, "versions", lead, query="?created_after=yesterday"), 400,
          "created_after")
    # an offset PostgreSQL does not take is read as the same moment in UTC (found by
    # schemathesis on PostgreSQL); the first moment with an offset is out of range
    offset = get(client, "versions", lead, query="?created_before=2001-06-26T02:34:44%2B17:15")
    assert ids(offset) == []
    error(get(client, "versions", lead, query="?created_after=0001-01-01T00:00:00%2B01:00"),
          400, "created_after")
    error(get(client, "releases", lead, query="?state=lost"), 400, "state")
    error(get(client, "versions", lead, query="?stdy=study-a"), 400, "stdy")
    error(get(client, "versions", lead, query="?site=a%00b"), 400, "site")


# --- details and downloads -------------------------------------------------------------------

def test_details_carry_the_summaries(client, world):
    auth = bearer(world["people"]["analyst_a1"])
    d = world["data"]["a1"]
    version = get(client, "version", auth, d["version_id"]).json()
    files = VersionFile.objects.filter(version_id=d["version_id"])
    assert version["manifest"]["n_files"] == DatasetVersion.objects.get(
        pk=d["version_id"]).n_files
    assert version["manifest"]["tasks"] == ["rest"] and version["quality_rounds"] == [
        d["round_id"]]
    assert "not a medical device" in version["research_use"] and files.exists()
    result = get(client, "quality_result", auth, d["run_id"]).json()
    assert result["verdict"] == "pass" and result["channels"]["Cz"]["status"] == "good"
    assert result["recordings"][0]["version"] == d["version_id"]
    release = get(client, "release", auth, d["release_id"]).json()
    assert release["sites"] == ["a1"] and release["state"] == "approved"
    run = get(client, "training_run_detail", auth, d["training_id"]).json()
    assert run["releases"] == [d["release_id"]] and run["feature_set"] == d["set_id"]


def test_downloads_stream_the_stored_bytes(client, world):
    from portal.features.models import FeatureSet
    from portal.training.models import ModelRelease

    user = world["people"]["analyst_a1"]
    auth = bearer(user)
    d = world["data"]["a1"]
    response = get(client, "version_download", auth, d["version_id"])
    assert "Research use only" in response["Cairn-Research-Use"]
    archive = zipfile.ZipFile(io.BytesIO(streamed(response)))
    stored = {f.path: f.sha256 for f in VersionFile.objects.filter(version_id=d["version_id"])}
    got = {name.split("/", 1)[1]: hashlib.sha256(archive.read(name)).hexdigest()
           for name in archive.namelist()}
    assert got == stored and stored
    table = streamed(get(client, "feature_set_download", auth, d["set_id"]))
    assert hashlib.sha256(table).hexdigest() == FeatureSet.objects.get(
        pk=d["set_id"]).table_sha256
    release = ModelRelease.objects.get(pk=d["release_id"])
    for part, field in (("model", "model_sha256"), ("card", "card_sha256")):
        body = streamed(get(client, "release_download", auth, release.pk, part,
                            query="?site=a1"))
        assert hashlib.sha256(body).hexdigest() == getattr(release, field), part
    derivative = zipfile.ZipFile(io.BytesIO(streamed(
        get(client, "quality_derivative", auth, d["round_id"]))))
    assert any(n.endswith("dataset_description.json") for n in derivative.namelist())
    # each download is in the audit trail as the token's
    events = Event.objects.filter(verb="download", actor=user)
    assert events.count() == 5 and {e.actor_kind for e in events} == {"token"}


# --- tokens: expiry and read-only ------------------------------------------------------------

def test_an_expired_token_is_refused_with_a_clear_error(client, world):
    user = world["people"]["dm_a1"]
    past = timezone.now() - datetime.timedelta(minutes=1)
    auth = bearer(user, expires_at=past)
    for name in ("me", "versions", "openapi"):
        body = error(get(client, name, auth), 401, "Authorization")
        assert body["code"] == "token_expired" and "expired" in body["error"]
        assert past.isoformat(timespec="seconds") in body["error"]
    response = get(client, "me", auth)
    assert 'error="invalid_token"' in response["WWW-Authenticate"]
    soon = bearer(user, expires_at=timezone.now() + datetime.timedelta(hours=1))
    assert get(client, "me", soon).status_code == 200
    client.force_login(user)  # the tokens page says which one expired
    rows = client.get(reverse("accounts:tokens")).content.decode().split("<tr>")
    assert sum("expired</td>" in row for row in rows) == 1


def test_a_read_only_token_reads_and_is_refused_on_every_write(client, world):
    user = world["people"]["dm_a1"]
    auth = bearer(user, read_only=True)
    d = world["data"]["a1"]
    assert get(client, "versions", auth).status_code == 200
    assert streamed(get(client, "feature_set_download", auth, d["set_id"]))
    before = (Upload.objects.count(), Event.objects.exclude(verb="download").count())
    writes = [("post", reverse("api:uploads"), {"site": "a1", "study": "study-a",
                                                "size": 10}),
              ("put", reverse("api:upload_chunk", args=[d["upload_id"]]) + "?offset=0", b"x"),
              ("post", reverse("api:upload_finish", args=[d["upload_id"]]),
               {"sha256": "0" * 64}),
              ("post", reverse("api:upload_confirm", args=[d["upload_id"]]),
               {"allow_removals": True}),
              ("post", reverse("api:training"), {"feature_set": d["set_id"]})]
    for method, url, body in writes:
        response = getattr(client, method)(url, body, content_type="application/json", **auth)
        refused = error(response, 403, "Authorization")
        assert refused["code"] == "read_only_token" and "read-only" in refused["error"]
    assert (Upload.objects.count(), Event.objects.exclude(verb="download").count()) == before
    # the same person's read-and-write token may write
    response = client.post(reverse("api:uploads"), {"site": "a1", "study": "study-a",
                                                    "size": 10},
                           content_type="application/json", **bearer(user))
    assert response.status_code == 201


def test_the_token_page_takes_scope_and_expiry_and_records_them(client, world):
    user = world["people"]["analyst_a1"]
    client.force_login(user)
    response = client.post(reverse("accounts:tokens"), {"name": "nightly fetch",
                                                        "expires_in_days": "30",
                                                        "read_only": "on"})
    assert response.status_code == 200
    token = ApiToken.objects.get(user=user, name="nightly fetch")
    assert token.read_only
    days = (token.expires_at - token.created_at) / datetime.timedelta(days=1)
    assert 29.99 < days < 30.01
    event = Event.objects.get(verb="token.created", actor=user)
    assert event.params == {"scope": "read",
                            "expires_at": token.expires_at.isoformat(timespec="seconds")}
    assert "read only" in response.content.decode()
    bad = client.post(reverse("accounts:tokens"), {"name": "x", "expires_in_days": "0"})
    assert "expires_in_days" in bad.context["form"].errors
    assert not ApiToken.objects.filter(user=user, name="x").exists()


def test_a_withdrawn_release_stays_listed_and_its_files_are_refused(client, world):
    """The web's rule (portal/training/access.py): a withdrawn release is still listed, with
    when and why; its files are not given out (410)."""
    from portal.training.models import ModelRelease, ReleaseState

    release = ModelRelease.objects.get(pk=world["data"]["a1"]["release_id"])
    release.state = ReleaseState.WITHDRAWN
    release.withdrawn_at = timezone.now()
    release.withdrawal_reason = "trained on a mislabelled session"
    release.save()
    auth = bearer(world["people"]["analyst_a1"])
    listed = get(client, "releases", auth).json()["results"]
    assert [r["state"] for r in listed] == ["withdrawn"]
    assert listed[0]["withdrawal_reason"] == "trained on a mislabelled session"
    for part in ("model", "bundle"):
        body = error(get(client, "release_download", auth, release.pk, part), 410)
        assert body["code"] == "withdrawn" and "mislabelled" in body["error"]
    assert not Event.objects.filter(verb="download", target_id=str(release.pk)).exists()
