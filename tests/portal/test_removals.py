"""No silent data removal: a snapshot that would remove files or participants waits for a yes
(web, API, command), the errors of a partial snapshot point to an addition, and any earlier
version can be restored as a new version, recorded in the audit trail. Invented plumbing
data: the small demo consortium."""

import io
import json
import shutil

import pytest
from django.core.management import call_command
from django.urls import reverse

from portal.accounts.models import ApiToken
from portal.audit.models import Event
from portal.datasets.models import DatasetVersion, Upload, UploadMode
from portal.datasets.services import (
    UploadError,
    cancel_held,
    confirm_removals,
    restore_version,
    staging_path,
    submit_path,
)
from portal.jobs import services as job_services
from portal.jobs.models import Job
from tests.helpers import member, run_pending
from tests.portal.test_versions import drop_subject, ingest

pytestmark = pytest.mark.django_db


@pytest.fixture
def lab(demo_small, tmp_path):
    """A writable copy of one small demo site, and a data manager for it (as in
    test_versions)."""
    from portal.accounts.setup import add_site, add_study

    info = demo_small.sites[0]
    root = tmp_path / info.slug
    shutil.copytree(info.bids_root, root)
    study, _ = add_study("rail", name="Rail")
    site, _ = add_site(info.slug, study_slug="rail", name=info.name)
    manager, _ = member("dm", role="data_manager", site_slug=info.slug)
    return {"root": root, "site": site, "study": study, "user": manager, "info": info}


def first_version(data):
    upload = ingest(data, data["root"])
    assert upload.state == "accepted", upload.errors
    return upload.version


def only_sub01(data, tmp_path):
    """The dataset's top files and sub-01 alone: what a person sends who means 'add this'."""
    partial = tmp_path / "partial"
    partial.mkdir()
    for item in data["root"].iterdir():
        if item.is_file():
            shutil.copy(item, partial / item.name)
    shutil.copytree(data["root"] / "sub-01", partial / "sub-01")
    return partial


# --- the hold --------------------------------------------------------------------------------

def test_snapshot_that_removes_waits_and_changes_nothing_until_confirmed(lab):
    v1 = first_version(lab)
    drop_subject(lab["root"], "03")
    held = ingest(lab, lab["root"])
    assert held.state == "held", held.errors
    removals = held.pending_removals
    assert removals["participants"] == ["03"] and removals["parent"] == v1.pk
    assert removals["files"] == v1.files.filter(path__startswith="sub-03/").count() > 0
    assert removals["first_paths"] and all(p.startswith("sub-03/")
                                           for p in removals["first_paths"])
    assert DatasetVersion.objects.count() == 1 and not hasattr(held, "version")
    assert staging_path(held).exists(), "the archive stays until the sender decides"
    assert Event.objects.filter(verb="upload.held", target_id=str(held.pk)).exists()

    confirm_removals(held.pk, user=lab["user"])
    assert run_pending("upload.validate") == 1
    held.refresh_from_db()
    assert held.state == "accepted", held.errors
    v2 = held.version
    assert v2.parent_id == v1.pk and not v2.files.filter(path__startswith="sub-03/").exists()
    assert len(v2.diff["removed"]) == removals["files"]
    confirmed = Event.objects.get(verb="upload.removals_confirmed", target_id=str(held.pk))
    assert confirmed.actor == lab["user"]


def test_allow_removals_up_front_makes_the_version_at_once(lab):
    first_version(lab)
    drop_subject(lab["root"], "03")
    upload = submit_path(lab["root"], site=lab["site"],
                         study=lab["study"], user=lab["user"],
                         allow_removals=True)
    run_pending("upload.validate")
    upload.refresh_from_db()
    assert upload.state == "accepted" and upload.version.diff["removed"]


def test_cancel_keeps_everything_and_frees_staging(lab,
                                                   django_capture_on_commit_callbacks):
    first_version(lab)
    drop_subject(lab["root"], "03")
    held = ingest(lab, lab["root"])
    with django_capture_on_commit_callbacks(execute=True):
        cancel_held(held.pk, user=lab["user"])
    held.refresh_from_db()
    assert held.state == "rejected" and "nothing was changed" in held.errors[0]["message"]
    assert not staging_path(held).exists()
    assert DatasetVersion.objects.count() == 1
    with pytest.raises(UploadError, match="not waiting"):
        confirm_removals(held.pk, user=lab["user"])


def test_addition_never_waits_and_a_first_addition_is_the_first_version(lab,
                                                                        tmp_path):
    upload = ingest(lab, lab["root"], mode=UploadMode.ADDITION)
    assert upload.state == "accepted" and upload.version.number == 1
    partial = only_sub01(lab, tmp_path)
    added = ingest(lab, partial, mode=UploadMode.ADDITION)
    assert added.state == "accepted", added.errors
    assert added.version.diff["removed"] == []
    assert added.version.n_files == upload.version.n_files


def test_partial_snapshot_errors_point_to_an_addition(client, lab, tmp_path):
    """Before: 'remove the row or add the participant's data', which led people to remove
    everyone else. Now the message names the version and says to send an addition."""
    first_version(lab)
    rejected = ingest(lab, only_sub01(lab, tmp_path))
    assert rejected.state == "rejected"
    about = [e for e in rejected.errors if e.get("code") == "participants.extra_subject"]
    assert {e["message"].split()[0] for e in about} == {"sub-02", "sub-03"}
    for problem in about:
        assert "is in version 1" in problem["message"]
        assert "as an addition" in problem["message"]
    first = rejected.warnings[0]
    assert first["code"] == "upload.snapshot_removes"
    assert "2 participants (sub-02, sub-03)" in first["message"]
    assert "as an addition" in first["message"]
    client.force_login(lab["user"])
    html = client.get(reverse("datasets:upload", args=[rejected.pk])).content.decode()
    assert "would remove" in html and "is in version 1" in html


# --- the web pages ---------------------------------------------------------------------------

def test_form_explains_both_modes_and_defaults_to_adding(client, lab):
    client.force_login(lab["user"])
    page = client.get(reverse("datasets:upload_new", args=[lab["site"].slug]))
    html = page.content.decode()
    assert "nothing already stored is removed" in html
    assert "Replace the whole dataset" in html
    assert 'value="addition"' in html
    checked = html.split('value="addition"')[1].split(">")[0]
    assert "checked" in checked, "adding is the default"


def test_held_upload_page_shows_removals_and_asks(client, lab):
    first_version(lab)
    drop_subject(lab["root"], "03")
    held = ingest(lab, lab["root"])
    client.force_login(lab["user"])
    html = client.get(reverse("datasets:upload", args=[held.pk])).content.decode()
    assert "Confirm what this upload removes" in html
    assert "sub-03" in html and held.pending_removals["first_paths"][0] in html
    assert reverse("datasets:upload_confirm", args=[held.pk]) in html
    assert "hx-trigger" not in html, "a held upload's page stops polling"
    # someone who may see but not upload cannot confirm
    analyst, _ = member("an", role="analyst", site_slug=lab["site"].slug)
    client.force_login(analyst)
    assert client.post(reverse("datasets:upload_confirm", args=[held.pk])).status_code == 403
    held.refresh_from_db()
    assert held.state == "held"
    client.force_login(lab["user"])
    response = client.post(reverse("datasets:upload_confirm", args=[held.pk]))
    assert response.status_code == 302
    held.refresh_from_db()
    assert held.state == "queued" and held.allow_removals


# --- API and command -------------------------------------------------------------------------

def test_api_reports_the_hold_and_takes_the_confirmation(client, lab):
    first_version(lab)
    drop_subject(lab["root"], "03")
    held = ingest(lab, lab["root"])
    _, raw = ApiToken.issue(lab["user"], "script")
    auth = {"HTTP_AUTHORIZATION": f"Bearer {raw}"}
    status = client.get(reverse("api:upload", args=[held.pk]), **auth).json()
    assert status["state"] == "held"
    need = status["needs_confirmation"]
    assert need["participants"] == ["03"] and need["files"] == len(need["first_paths"]) or \
        need["files"] > len(need["first_paths"])
    assert "allow_removals" in need["message"]
    url = reverse("api:upload_confirm", args=[held.pk])
    bad = client.post(url, json.dumps({"allow_removals": "yes"}),
                      content_type="application/json", **auth)
    assert bad.status_code == 400 and bad.json()["field"] == "allow_removals"
    ok = client.post(url, json.dumps({"allow_removals": True}),
                     content_type="application/json", **auth)
    assert ok.status_code == 202 and ok.json()["state"] == "queued"
    again = client.post(url, json.dumps({"allow_removals": True}),
                        content_type="application/json", **auth)
    assert again.status_code == 409


def test_api_refuses_a_non_boolean_allow_removals(client, lab):
    _, raw = ApiToken.issue(lab["user"], "script")
    response = client.post(reverse("api:uploads"), json.dumps({
        "site": lab["site"].slug, "study": "rail", "mode": "snapshot",
        "filename": "x.zip", "size": 10, "allow_removals": 1}),
        content_type="application/json", HTTP_AUTHORIZATION=f"Bearer {raw}")
    assert response.status_code == 400 and response.json()["field"] == "allow_removals"
    assert not Upload.objects.exists()


@pytest.mark.django_db(transaction=True)
def test_upload_bids_stops_in_needs_confirmation_then_goes_with_the_flag(lab,
                                                                         monkeypatch):
    from portal.jobs import runner

    monkeypatch.setattr(job_services, "send", lambda job_id: runner.run(job_id) and True)
    args = ["--site", lab["site"].slug, "--study", "rail", "--as-user", "dm",
            "--wait", "--json"]
    call_command("upload_bids", str(lab["root"]), *args, stdout=io.StringIO())
    drop_subject(lab["root"], "03")
    out = io.StringIO()
    with pytest.raises(SystemExit) as exit_status:
        call_command("upload_bids", str(lab["root"]), *args, stdout=out)
    assert exit_status.value.code == 3
    report = json.loads(out.getvalue())
    assert report["state"] == "held" and report["dataset_version"] is None
    assert report["needs_confirmation"]["participants"] == ["03"]
    assert "--allow-removals" in report["needs_confirmation"]["message"]
    assert DatasetVersion.objects.count() == 1
    out = io.StringIO()
    call_command("upload_bids", str(lab["root"]), *args, "--allow-removals",
                 stdout=out)
    report = json.loads(out.getvalue())
    assert report["state"] == "accepted" and DatasetVersion.objects.count() == 2


# --- restore ---------------------------------------------------------------------------------

def two_versions(data):
    v1 = first_version(data)
    drop_subject(data["root"], "03")
    upload = submit_path(data["root"], site=data["site"], study=data["study"],
                         user=data["user"], allow_removals=True)
    run_pending("upload.validate")
    upload.refresh_from_db()
    return v1, upload.version


def test_restore_makes_a_new_version_with_the_old_files_and_records_both_hashes(lab):
    v1, v2 = two_versions(lab)
    v3 = restore_version(v1, user=lab["user"])
    assert v3.number == 3 and v3.parent_id == v2.pk
    assert v3.manifest_sha256 == v1.manifest_sha256
    assert sorted(v3.files.values_list("path", "sha256")) == \
        sorted(v1.files.values_list("path", "sha256"))
    assert v3.recordings.count() == v1.recordings.count()
    assert sorted(v3.recordings.values_list("path", "blocks__rating")) == \
        sorted(v1.recordings.values_list("path", "blocks__rating"))
    assert v3.diff["added"] and not v3.diff["removed"]
    event = Event.objects.get(verb="dataset_version.restored")
    assert {"dataset_version": v1.pk, "number": 1,
            "manifest_sha256": v1.manifest_sha256} in event.inputs
    assert event.outputs == [{"dataset_version": v3.pk, "number": 3,
                              "manifest_sha256": v3.manifest_sha256}]
    assert event.actor == lab["user"]


def test_restore_that_removes_needs_the_flag(lab):
    v1, v2 = two_versions(lab)
    restore_version(v1, user=lab["user"])
    with pytest.raises(UploadError, match=r"would remove \d+ files of version 3 and 1 "
                                          r"participant \(sub-03\)"):
        restore_version(v2, user=lab["user"])
    assert DatasetVersion.objects.count() == 3
    v4 = restore_version(v2, user=lab["user"], allow_removals=True)
    assert v4.manifest_sha256 == v2.manifest_sha256


def test_restore_page_and_command(client, lab):
    v1, v2 = two_versions(lab)
    analyst, _ = member("an", role="analyst", site_slug=lab["site"].slug)
    client.force_login(analyst)
    assert client.get(reverse("datasets:restore", args=[v1.pk])).status_code == 403
    assert "data-restore" not in client.get(reverse("datasets:version",
                                                    args=[v1.pk])).content.decode()
    client.force_login(lab["user"])
    assert "data-restore" in client.get(reverse("datasets:version",
                                                args=[v1.pk])).content.decode()
    page = client.get(reverse("datasets:restore", args=[v1.pk])).content.decode()
    assert "0 removed" in page and "as version 3" in page
    response = client.post(reverse("datasets:restore", args=[v1.pk]))
    assert response.status_code == 302
    v3 = DatasetVersion.objects.get(number=3)
    assert v3.manifest_sha256 == v1.manifest_sha256
    out = io.StringIO()
    with pytest.raises(Exception, match="--allow-removals"):
        call_command("restore_version", "--site", lab["site"].slug, "--study", "rail",
                     "--number", "2", "--as-user", "dm", stdout=out)
    call_command("restore_version", "--site", lab["site"].slug, "--study", "rail",
                 "--number", "2", "--as-user", "dm", "--allow-removals", "--json", stdout=out)
    report = json.loads(out.getvalue())
    assert report["number"] == 4 and report["manifest_sha256"] == v2.manifest_sha256
    assert Job.objects.filter(kind="qc.version").count() >= 4
