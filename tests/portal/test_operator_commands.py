"""The commands an operator changes things with: each records an audit event, is safe to run
again, and names what it does not know."""

from io import StringIO

import pytest
from django.core.management import CommandError, call_command
from django.urls import reverse

from portal.accounts.models import AccountFlags, ApiToken, LoginFailure, Membership
from portal.audit.models import Event
from portal.datasets.models import Upload, UploadState
from portal.datasets.services import staging_path, start_chunked
from portal.jobs.models import Job, JobState
from portal.jobs.services import claim

pytestmark = pytest.mark.django_db


def run(*args):
    out = StringIO()
    call_command(*args, stdout=out)
    return out.getvalue()


def events(verb):
    return list(Event.objects.filter(verb=verb).order_by("pk"))


def test_revoke_membership_removes_one_role_once_and_records_it(client, consortium):
    user = consortium["people"]["dm_a1"]
    before = len(events("membership.changed"))
    out = run("revoke_membership", "dm_a1", "--site", "a1", "--role", "data_manager",
              "--reason", "left the lab")
    assert "data_manager at a1 in study-a removed" in out
    assert not Membership.objects.filter(user=user).exists()
    event = events("membership.changed")[-1]
    assert event.params == {"role": "data_manager", "site": "a1", "study": "study-a",
                            "change": "removed", "reason": "left the lab"}
    assert event.site.slug == "a1" and event.target_id == str(user.pk)
    again = run("revoke_membership", "dm_a1", "--site", "a1", "--role", "data_manager",
                "--reason", "left the lab")
    assert "nothing to do" in again
    assert len(events("membership.changed")) == before + 1
    _, raw = ApiToken.issue(user, "script")
    assert client.get(reverse("api:me"), HTTP_AUTHORIZATION=f"Bearer {raw}").json()[
        "visible_sites"] == []


def test_revoke_membership_in_one_of_two_studies_needs_the_study(consortium):
    from portal.accounts.setup import add_site
    from tests.helpers import member

    add_site("a1", study_slug="study-b", name="Site A1")
    member("analyst_a1", role="analyst", site_slug="a1", study_slug="study-b")
    with pytest.raises(CommandError, match="several studies .*study-a, study-b.*--study"):
        run("revoke_membership", "analyst_a1", "--site", "a1", "--role", "analyst",
            "--reason", "x")
    run("revoke_membership", "analyst_a1", "--site", "a1", "--role", "analyst",
        "--study", "study-b", "--reason", "study B ended")
    left = Membership.objects.filter(user__username="analyst_a1")
    assert [(m.site.slug, m.study.slug) for m in left] == [("a1", "study-a")]


def test_revoke_membership_of_an_operator_and_of_every_role(consortium):
    operator = consortium["people"]["operator"]
    run("revoke_membership", "operator", "--role", "operator", "--reason", "handed over")
    operator.refresh_from_db()
    assert not operator.is_superuser and not operator.is_staff
    assert events("membership.changed")[-1].params["role"] == "operator"
    run("revoke_membership", "lead_a", "--all", "--reason", "left the consortium")
    assert not Membership.objects.filter(user__username="lead_a").exists()


@pytest.mark.parametrize("args, message", [
    (("nobody", "--role", "analyst", "--site", "a1"), "no user named 'nobody'"),
    (("dm_a1", "--role", "analyst", "--site", "zz"), "unknown site 'zz'; known sites: a1, a2"),
    (("dm_a1", "--role", "boss", "--site", "a1"), "unknown role 'boss'"),
    (("dm_a1", "--role", "analyst"), "give --site"),
    (("dm_a1", "--role", "analyst", "--site", "a1", "--study", "zz"), "unknown study 'zz'"),
    (("dm_a1",), "either --role"),
])
def test_revoke_membership_names_what_it_does_not_know(consortium, args, message):
    with pytest.raises(CommandError, match=message):
        run("revoke_membership", *args, "--reason", "x")
    assert Membership.objects.filter(user__username="dm_a1").exists()


def test_revoke_token_by_its_prefix_refuses_scripts_and_records_it(client, consortium):
    user = consortium["people"]["dm_a1"]
    token, raw = ApiToken.issue(user, "lab server")
    out = run("revoke_token", f"{token.PREFIX}{token.lookup}…", "--reason", "leaked in a log")
    assert "revoked" in out
    token.refresh_from_db()
    assert token.revoked_at is not None
    assert client.get(reverse("api:me"), HTTP_AUTHORIZATION=f"Bearer {raw}").status_code == 401
    event = events("token.revoked")[-1]
    assert event.target_id == str(token.pk) and event.params["reason"] == "leaked in a log"
    assert "already revoked" in run("revoke_token", raw, "--reason", "leaked in a log")
    assert len(events("token.revoked")) == 1


def test_revoke_token_of_a_person_and_what_it_does_not_know(consortium):
    user = consortium["people"]["dm_a1"]
    for name in ("one", "two"):
        ApiToken.issue(user, name)
    run("revoke_token", "--user", "dm_a1", "--reason", "left the lab")
    assert not ApiToken.objects.filter(user=user, revoked_at__isnull=True).exists()
    assert len(events("token.revoked")) == 2
    with pytest.raises(CommandError, match="no API token cairn_abcdefabcdef"):
        run("revoke_token", "cairn_abcdefabcdef", "--reason", "x")
    with pytest.raises(CommandError, match="no user named 'ghost'"):
        run("revoke_token", "--user", "ghost", "--reason", "x")


def test_reset_password_ends_sessions_and_records_it(client, consortium):
    user = consortium["people"]["dm_a1"]
    client.force_login(user)
    assert client.get(reverse("dashboard:home")).status_code == 200
    LoginFailure.objects.create(username="dm_a1", address="192.0.2.1")
    out = run("reset_password", "dm_a1", "--reason", "asked by phone, identity checked")
    password = out.split("one-time password: ")[1].split()[0]
    user.refresh_from_db()
    assert user.check_password(password)
    assert AccountFlags.needs_new_password(user)
    assert not LoginFailure.objects.filter(username="dm_a1").exists()
    assert client.get(reverse("dashboard:home")).status_code == 302  # the session ended
    event = events("password.reset")[-1]
    assert event.target_id == str(user.pk) and password not in str(event.params)
    with pytest.raises(CommandError, match="no user named 'ghost'"):
        run("reset_password", "ghost", "--reason", "x")


def test_withdraw_an_upload_still_receiving(consortium, django_capture_on_commit_callbacks):
    site = consortium["sites"]["a1"]
    upload = start_chunked(site=site, study=site.studies.get(),
                           user=consortium["people"]["dm_a1"], mode="snapshot",
                           label="wrong-folder.tar", expected_bytes=1000)
    staged = staging_path(upload)
    assert staged.exists()
    with django_capture_on_commit_callbacks(execute=True):
        out = run("withdraw_upload", str(upload.pk), "--reason", "participants not consented")
    assert "withdrawn: was receiving" in out
    upload.refresh_from_db()
    assert upload.state == UploadState.REJECTED
    assert "participants not consented" in upload.errors[0]["message"]
    assert not staged.exists()
    event = events("upload.withdrawn")[-1]
    assert event.params["state_before"] == "receiving" and event.site == site
    assert "already withdrawn" in run("withdraw_upload", str(upload.pk), "--reason", "again")
    assert len(events("upload.withdrawn")) == 1


def _queued(consortium, job_state):
    site = consortium["sites"]["a1"]
    upload = Upload.objects.create(site=site, study=site.studies.get(), source="api",
                                   label="a1.tar", state=UploadState.QUEUED)
    job = Job.objects.create(kind="upload.validate", site=site, study=upload.study,
                             target_type="datasets.upload", target_id=str(upload.pk),
                             state=job_state)
    return upload, job


def test_withdraw_an_upload_waiting_for_validation_cancels_its_job(consortium):
    upload, job = _queued(consortium, JobState.QUEUED)
    out = run("withdraw_upload", str(upload.pk), "--reason", "sent twice")
    assert f"validation job {job.pk} cancelled" in out
    job.refresh_from_db()
    assert job.state == JobState.FAILED and "withdrawn" in job.error
    assert claim(job.pk, "a-worker") is None  # no worker can start it any more
    assert events("upload.withdrawn")[-1].params["job"] == job.pk


def test_uploads_being_validated_or_accepted_are_not_withdrawn(consortium):
    upload, job = _queued(consortium, JobState.RUNNING)
    with pytest.raises(CommandError, match=f"being validated now \\(job {job.pk}"):
        run("withdraw_upload", str(upload.pk), "--reason", "x")
    upload.refresh_from_db()
    assert upload.state == UploadState.QUEUED
    Upload.objects.filter(pk=upload.pk).update(state=UploadState.ACCEPTED)
    with pytest.raises(CommandError, match="stays on record"):
        run("withdraw_upload", str(upload.pk), "--reason", "x")
    with pytest.raises(CommandError, match="no upload 999999"):
        run("withdraw_upload", "999999", "--reason", "x")
    assert events("upload.withdrawn") == []
