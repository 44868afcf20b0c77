"""A person's channel decision changes the recording's verdict and the counts that pages and
the study overview show; the checks' stored result stays as computed (its hash is in the
audit trail). Plumbing on the invented demo consortium; the verdict rule itself is the
checks' (tests/unit/test_qc_checks.py)."""

import datetime

import pytest
from django.urls import reverse
from django.utils import timezone

from portal.accounts.setup import add_site, add_study
from portal.audit.events import canonical_sha256
from portal.audit.models import Event
from portal.dashboard.overview import needing_review, study_numbers
from portal.datasets.services import submit_path
from portal.quality.models import EffectiveVerdict, QCRound, QCRun
from portal.quality.services import set_override
from portal.studies.models import current_protocol, save_protocol
from tests.helpers import member, run_pending

pytestmark = pytest.mark.django_db


@pytest.fixture
def checked(demo_small):
    """The small demo's 16-channel site ingested and checked, with a shortest usable
    recording of 10 s (its recordings last 20 s, which the default 60 s would put under
    review whatever their channels)."""
    info = demo_small.sites[0]
    study, _ = add_study("rail", name="Rail")
    protocol = current_protocol(study).data
    save_protocol(study, {**protocol, "qc": {**protocol["qc"], "min_duration_s": 10.0}},
                  user=None, note="the demo's short recordings")
    site, _ = add_site(info.slug, study_slug="rail", name=info.name)
    manager, _ = member("dm", role="data_manager", site_slug=info.slug)
    lead, _ = member("lead", role="study_lead", site_slug=info.slug)
    upload = submit_path(info.bids_root, site=site, study=study, user=manager)
    run_pending("upload.validate")
    upload.refresh_from_db()
    run_pending("qc.version")
    run_pending("qc.recording")
    return {"version": upload.version, "study": study, "site": site, "manager": manager,
            "lead": lead, "round": QCRound.objects.get(version=upload.version)}


def _review_for_bad_channels_only(version, qc_round):
    """A recording judged "needs a look" for its share of bad channels alone, which one
    channel fewer would bring under the review threshold; with its run."""
    share = qc_round.settings["bad_channel_share_review"]
    for recording in version.recordings.order_by("path"):
        run = QCRun.objects.get(recording_sha256=recording.sha256,
                                settings_digest=qc_round.settings_digest)
        reasons = run.result["verdict_reasons"]
        if (run.verdict == "review" and len(reasons) == 1
                and reasons[0].startswith(f"{run.n_bad_channels} of {run.n_channels} channels")
                and (run.n_bad_channels - 1) / run.n_channels < share):
            return recording, run
    pytest.fail("the small demo has no recording under review for its bad channels alone")


def test_setting_a_flagged_channel_good_changes_verdict_counts_and_overview(client, checked):
    version, qc_round, site = checked["version"], checked["round"], checked["site"]
    recording, run = _review_for_bad_channels_only(version, qc_round)
    stored = canonical_sha256(run.result)
    n_bad = run.n_bad_channels
    channel = run.result["bad_channels"][0]
    now = timezone.now() + datetime.timedelta(days=1)
    before = study_numbers(checked["study"], [site.pk], now=now)["sites"][site.pk]
    client.force_login(checked["manager"])
    round_url = reverse("quality:round", args=[qc_round.pk])
    counts_before = client.get(round_url).context["counts"]
    page_url = reverse("quality:recording", args=[qc_round.pk, recording.pk])
    assert f"{n_bad} of {run.n_channels} channels bad" in client.get(page_url).content.decode()
    assert recording in needing_review(site, version, qc_round)

    response = client.post(reverse("quality:override", args=[qc_round.pk, recording.pk]),
                           {"channel": channel, "status": "good",
                            "reason": "checked the raw trace: a clean channel"})
    assert response.status_code == 302

    # The recording's page: the verdict and count after the decision, the checks' own kept.
    body = client.get(page_url).content.decode()
    assert f"{n_bad - 1} of {run.n_channels} channels bad" in body
    assert "Verdict: <span class=\"state verdict-pass\">usable</span>" in body
    assert f"The checks alone found {n_bad} of {run.n_channels} channels bad" in body

    # The round's counts and row.
    page = client.get(round_url)
    counts = page.context["counts"]
    assert counts["pass"] == counts_before["pass"] + 1
    assert counts["review"] == counts_before["review"] - 1
    row = next(r for r in page.context["rows"] if r["recording"] == recording)
    assert row["verdict"] == "pass" and row["shown"]["n_bad_channels"] == n_bad - 1
    assert f"{n_bad - 1} of {run.n_channels}" in page.content.decode()

    # The study overview and the site's list of recordings that need a look.
    after = study_numbers(checked["study"], [site.pk], now=now)["sites"][site.pk]
    assert after["verdicts"]["pass"] == before["verdicts"]["pass"] + 1
    assert after["verdicts"]["review"] == before["verdicts"]["review"] - 1
    assert after["bad_channels"] == before["bad_channels"] - 1
    assert recording not in needing_review(site, version, qc_round)

    # The stored result is untouched; the audit event records the verdict before and after.
    run.refresh_from_db()
    assert canonical_sha256(run.result) == stored
    assert run.verdict == "review" and run.n_bad_channels == n_bad
    event = Event.objects.get(verb="qc.channel_override")
    assert event.outputs == [{"qc_run": run.pk, "settings_digest": run.settings_digest,
                              "code_version": run.code_version,
                              "before": {"verdict": "review", "n_bad_channels": n_bad},
                              "after": {"verdict": "pass", "n_bad_channels": n_bad - 1}}]

    # Setting it bad again brings the checks' verdict back, and says so in the next event.
    set_override(site=site, recording=recording, channel=channel, status="bad",
                 reason="second look: it does drift", user=checked["manager"])
    decided = EffectiveVerdict.objects.get(run=run)
    assert (decided.verdict, decided.n_bad_channels) == ("review", n_bad)
    last = Event.objects.filter(verb="qc.channel_override").order_by("-id").first()
    assert last.outputs[0]["before"] == {"verdict": "pass", "n_bad_channels": n_bad - 1}
    assert last.outputs[0]["after"] == {"verdict": "review", "n_bad_channels": n_bad}


def test_a_new_round_counts_earlier_decisions(checked):
    """Decisions belong to the recording file: a round with other settings, checked after
    the decision, shows the verdict with it from the start."""
    from portal.quality.services import start_round

    version, qc_round, site = checked["version"], checked["round"], checked["site"]
    recording, run = _review_for_bad_channels_only(version, qc_round)
    channel = run.result["bad_channels"][0]
    set_override(site=site, recording=recording, channel=channel, status="good",
                 reason="a clean channel", user=checked["manager"])
    stricter = {**qc_round.settings, "rejected_time_share_fail": 0.9}
    second, created = start_round(version, qc_settings=stricter)
    assert created
    run_pending("qc.version")
    run_pending("qc.recording")
    new_run = QCRun.objects.get(recording_sha256=recording.sha256,
                                settings_digest=second.settings_digest)
    decided = EffectiveVerdict.objects.get(run=new_run)
    assert decided.n_bad_channels == new_run.n_bad_channels - 1
    assert channel not in [name for name, info in new_run.result["channels"].items()
                           if info["status"] == "good"]
