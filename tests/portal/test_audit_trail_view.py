"""The audit trail as a study lead or auditor reads it: research events by default, job
bookkeeping only when asked for, filters by kind, site and date that survive paging and the
CSV export, each event's object linked to its page only for those who may open it, and each
event's inputs, outputs, parameters and code version on the page and in the CSV (cells made
inert for spreadsheets). Plumbing on invented rows: nothing of the science is checked here."""

import ast
import csv
import io
import json
from pathlib import Path

import pytest
from django.urls import reverse

from portal.accounts.models import Study
from portal.audit.events import record
from portal.audit.kinds import JOBS, KINDS, RESEARCH, kind_of
from portal.audit.models import Event
from tests.portal import objects

pytestmark = pytest.mark.django_db

REPO = Path(__file__).resolve().parents[2]
SHA = "ab" * 32


def _recorded_verbs():
    """Every verb given to record(...) as a literal in portal/."""
    verbs = set()
    for path in (REPO / "portal").rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if (isinstance(node, ast.Call) and node.args
                    and getattr(node.func, "id", getattr(node.func, "attr", "")) == "record"
                    and isinstance(node.args[0], ast.Constant)
                    and isinstance(node.args[0].value, str)):
                verbs.add(node.args[0].value)
    return verbs


def test_every_verb_the_portal_records_has_one_kind():
    verbs = _recorded_verbs()
    assert {"upload.received", "job.queued", "release.approved", "download"} <= verbs
    unknown = sorted(v for v in verbs if not kind_of(v))
    assert not unknown, f"verbs of no kind (add their family in portal/audit/kinds.py): {unknown}"
    jobs = sorted(v for v in verbs if kind_of(v) == JOBS)
    assert jobs == ["job.failed", "job.finished", "job.queued", "job.resent", "job.retrying",
                    "worker.checked"]
    # a family is a whole first word: "uploads.x" or "downloaded" are not research verbs
    assert kind_of("uploads.x") == "" and kind_of("downloaded") == ""
    assert all(kind_of(v) in RESEARCH for v in ("dataset_version.restored",
                                                  "qc.channel_override", "features.created",
                                                  "release.withdrawn", "protocol.changed",
                                                  "membership.changed"))


@pytest.fixture
def trail(consortium):
    """Objects of site a1 and b1, and events of each kind about them."""
    a1, b1 = consortium["sites"]["a1"], consortium["sites"]["b1"]
    study_a, study_b = Study.objects.get(slug="study-a"), Study.objects.get(slug="study-b")
    own = objects.fill(a1, study_a, owner=consortium["people"]["dm_a1"])
    other = objects.fill(b1, study_b, owner=consortium["people"]["dm_b1"])
    upload = own["objects"]["upload"]
    record("job.queued", target=upload, site=a1, study=study_a, summary="bookkeeping queued",
           params={"kind": "upload.validate"})
    record("job.finished", target=upload, site=a1, study=study_a, worker=True,
           summary="bookkeeping finished")
    record("worker.checked", worker=True, summary="bookkeeping worker check")
    record("dataset_version.restored", target=own["objects"]["version"], site=a1,
           study=study_a, summary="a1 version restored", inputs=[{"version": 1,
                                                                  "sha256": SHA}],
           outputs=[{"version": 2, "manifest_sha256": "cd" * 32}], params={"from": 1})
    record("login", actor=consortium["people"]["lead_a"], summary="signed in")
    return {"a1": a1, "b1": b1, "study_a": study_a, "own": own, "other": other}


def _verbs(response):
    return [e.verb for e in response.context["events"]]


def _csv(client, **query):
    body = b"".join(client.get(reverse("audit:export"), query).streaming_content).decode()
    return list(csv.DictReader(io.StringIO(body)))


def test_research_events_by_default_and_job_bookkeeping_on_request(client, consortium, trail):
    client.force_login(consortium["people"]["lead_a"])
    page = client.get(reverse("audit:events"))
    verbs = _verbs(page)
    assert {"upload.received", "training.requested", "dataset_version.restored"} <= set(verbs)
    assert all(kind_of(v) in RESEARCH for v in verbs), verbs
    assert not any(v.startswith(("job.", "worker.")) for v in verbs)
    assert "login" not in verbs  # sign-ins are not research events
    assert {r["verb"] for r in _csv(client)} == set(verbs)  # the CSV exports the same view

    with_jobs = client.get(reverse("audit:events"), {"jobs": "1"})
    verbs = set(_verbs(with_jobs))
    assert {"job.queued", "job.finished", "upload.received"} <= verbs
    assert 'name="jobs" value="1" checked' in with_jobs.content.decode()
    assert {"job.queued", "job.finished"} <= {r["verb"] for r in _csv(client, jobs="1")}

    only_jobs = set(_verbs(client.get(reverse("audit:events"), {"kind": "jobs"})))
    assert only_jobs and all(kind_of(v) == JOBS for v in only_jobs)
    data = set(_verbs(client.get(reverse("audit:events"), {"kind": "data"})))
    assert data == {"upload.received", "dataset_version.restored"}
    everything = set(_verbs(client.get(reverse("audit:events"), {"kind": "all"})))
    assert "login" in everything and not any(kind_of(v) == JOBS for v in everything)
    # a verb prefix searches every kind
    assert set(_verbs(client.get(reverse("audit:events"), {"verb": "job."}))) == {
        "job.queued", "job.finished"}
    # the operator's worker check is not study A's: the lead never sees it
    assert "worker.checked" not in set(_verbs(client.get(reverse("audit:events"),
                                                          {"kind": "all", "jobs": "1"})))


def test_filters_by_site_and_date_keep_through_pages_and_csv(client, consortium, trail):
    a1 = trail["a1"]
    for i in range(60):
        record("job.queued", site=a1, study=trail["study_a"], summary=f"queued {i}")
        record("download", site=a1, study=trail["study_a"], summary=f"download {i}")
    client.force_login(consortium["people"]["operator"])
    query = {"kind": "downloads", "jobs": "1", "site": "a1"}
    seen, cursor, pages = [], None, 0
    while True:
        page = client.get(reverse("audit:events"), {**query, **({"after": cursor}
                                                               if cursor else {})})
        assert page.context["query"] == "kind=downloads&jobs=1&site=a1"
        seen += [(e.pk, e.verb, e.site.slug) for e in page.context["events"]]
        pages += 1
        cursor = page.context["next"]
        if not cursor:
            break
        # the next page's link keeps the filters
        assert "?kind=downloads&amp;jobs=1&amp;site=a1&amp;after=" in page.content.decode()
    assert pages == 3 and len(seen) == 122  # 60 downloads, 60 + 2 job events at a1
    assert {verb for _, verb, _ in seen} == {"download", "job.queued", "job.finished"}
    assert {slug for _, _, slug in seen} == {"a1"}
    assert sorted(int(r["id"]) for r in _csv(client, **query)) == sorted(p for p, _, _ in seen)
    assert len(_csv(client, kind="downloads", site="a1")) == 60

    today = Event.objects.latest("at").at.date().isoformat()
    assert len(_csv(client, kind="downloads", site="a1", **{"from": today, "to": today})) == 60
    assert _csv(client, kind="downloads", site="a1", **{"to": "2000-01-01"}) == []
    assert _csv(client, kind="downloads", site="b1") == []


def test_csv_has_hashes_parameters_and_code_version_made_inert(client, consortium, trail):
    a1 = trail["a1"]
    # written as record() writes it, with cells a spreadsheet would run
    Event.objects.create(verb="dataset_version.created", actor_kind="worker", site=a1,
                         study=trail["study_a"], summary="=HYPERLINK(\"http://x\")",
                         inputs=[{"upload": 7, "sha256": SHA}],
                         outputs=[{"version": 3, "manifest_sha256": "cd" * 32}],
                         params={"note": "=1+1"},
                         code_version={"commit": "@SUM(A1)", "modified": True,
                                       "libraries": {"mne": "1.0"}})
    client.force_login(consortium["people"]["lead_a"])
    rows = _csv(client, verb="dataset_version.created")
    assert len(rows) == 1
    row = rows[0]
    for column in ("kind", "inputs", "outputs", "params", "code_commit", "code_modified",
                   "code_versions"):
        assert column in row
    assert row["kind"] == "data"
    assert json.loads(row["inputs"]) == [{"upload": 7, "sha256": SHA}]
    assert json.loads(row["outputs"]) == [{"version": 3, "manifest_sha256": "cd" * 32}]
    assert json.loads(row["params"]) == {"note": "=1+1"}
    assert row["code_commit"] == "'@SUM(A1)" and row["summary"].startswith("'=HYPERLINK")
    assert row["code_modified"] == "true"
    assert json.loads(row["code_versions"])["libraries"] == {"mne": "1.0"}

    page = client.get(reverse("audit:events")).content.decode()
    assert SHA in page and "cd" * 32 in page  # inputs' and outputs' hashes in full
    assert "&quot;from&quot;: 1" in page  # the restore's parameters
    commit = Event.objects.get(verb="dataset_version.restored").code_version["commit"]
    assert commit[:12] in page


def test_objects_are_linked_only_where_the_reader_may_open_them(client, consortium, trail):
    own, other = trail["own"]["objects"], trail["other"]["objects"]
    lead = consortium["people"]["lead_a"]
    # the lead's own action about another study's object: the event is theirs to see, the
    # object is not
    record("download", actor=lead, site=trail["a1"], study=trail["study_a"],
           target=other["upload"], summary="own action, foreign object")
    record("features.created", target=own["features"], study=trail["study_a"],
           summary="set made")
    own_upload = reverse("datasets:upload", args=[own["upload"].pk])
    own_run = reverse("training:detail", args=[own["training"].pk])
    own_set = reverse("features:detail", args=[own["features"].pk])
    foreign = reverse("datasets:upload", args=[other["upload"].pk])

    client.force_login(lead)
    page = client.get(reverse("audit:events"))
    by_summary = {e.summary: e for e in page.context["events"]}
    assert by_summary["own action, foreign object"].object_url is None
    body = page.content.decode()
    assert f'href="{own_upload}"' in body and f'href="{own_run}"' in body
    assert f'href="{own_set}"' in body
    assert f'href="{foreign}"' not in body
    for url in (own_upload, own_run, own_set):
        assert client.get(url).status_code == 200  # every link opens

    # a data manager of a1 sees a1's upload linked, never study B's
    client.force_login(consortium["people"]["dm_a1"])
    body = client.get(reverse("audit:events")).content.decode()
    assert f'href="{own_upload}"' in body and f'href="{foreign}"' not in body

    client.force_login(consortium["people"]["operator"])
    body = client.get(reverse("audit:events")).content.decode()
    assert f'href="{foreign}"' in body and f'href="{own_upload}"' in body


def test_every_kind_has_a_label_and_the_research_kinds_exist():
    assert set(RESEARCH) <= set(KINDS) and JOBS in KINDS and JOBS not in RESEARCH
    families = [f for _, fams in KINDS.values() for f in fams]
    assert len(families) == len(set(families))  # one kind per family


def _linkable_events(filled, site, study):
    """One event about each kind of object the trail links, as the apps record them."""
    made = filled["objects"]
    for verb, target in (("upload.accepted", made["upload"]),
                         ("dataset_version.created", made["version"]),
                         ("features.created", made["features"]),
                         ("training.finished", made["training"]),
                         ("release.approved", made["release"]),
                         ("download", made["release"])):
        record(verb, target=target, site=site, study=study, summary=f"{verb} {site.slug}")
    record("qc.started", target=made["version"].qc_rounds.get(), site=site, study=study,
           summary="round started")
    record("qc.finished", target=made["qc"], site=site, study=study, summary="result stored")
    record("site.joined", target=site, site=site, study=study, summary="joined")
    record("study.renamed", target=study, study=study, summary="renamed")


def test_the_page_query_count_does_not_grow_with_linked_objects(client, consortium, trail):
    from django.db import connection
    from django.test.utils import CaptureQueriesContext

    a2 = consortium["sites"]["a2"]
    _linkable_events(trail["own"], trail["a1"], trail["study_a"])
    client.force_login(consortium["people"]["lead_a"])

    def count():
        client.get(reverse("audit:events"))  # warm caches (content types)
        with CaptureQueriesContext(connection) as captured:
            page = client.get(reverse("audit:events"))
        return len(captured.captured_queries), page

    before, page = count()
    linked = sum(1 for e in page.context["events"] if e.object_url)
    more = objects.fill(a2, trail["study_a"], label="second")
    _linkable_events(more, a2, trail["study_a"])
    after, page = count()
    assert sum(1 for e in page.context["events"] if e.object_url) >= linked + 9
    assert after == before, (before, after)
