"""Approving a release reads its model card first and needs the study lead's explicit yes;
an approved release can be withdrawn with a reason, after which every file of it (archive,
model, card, feature specification, PROV record) is refused saying when, by whom and why,
and the withdrawal is in the audit trail and on the release pages. Plumbing on invented
rows (tests/portal/objects.py): nothing of the science is checked here."""

import pytest
from django.urls import reverse

from portal.accounts.models import Study
from portal.audit.models import Event
from portal.training.downloads import RELEASE_PARTS
from portal.training.models import ModelRelease
from tests.portal import objects

pytestmark = pytest.mark.django_db

CARD = "an invented release file"  # what objects.training_of stores as every release file


@pytest.fixture
def releases(consortium):
    """Study A's data at a1 with an approved release and a pending one; study B's at b1."""
    a1 = consortium["sites"]["a1"]
    study_a = Study.objects.get(slug="study-a")
    own = objects.fill(a1, study_a)
    approved = own["objects"]["release"]
    ModelRelease.objects.filter(pk=approved.pk).update(bundle_sha256=approved.model_sha256)
    pending = objects.training_of(study_a, own["objects"]["features"], state="pending")
    other = objects.fill(consortium["sites"]["b1"], Study.objects.get(slug="study-b"))
    return {"approved": approved, "pending": pending["release"],
            "other": other["objects"]["release"]}


def _state(release):
    return ModelRelease.objects.get(pk=release.pk).state


def _events(verb, release):
    return Event.objects.filter(verb=verb, target_type="training.modelrelease",
                                target_id=str(release.pk))


def test_approval_shows_the_card_and_needs_the_explicit_yes(client, consortium, releases):
    release = releases["pending"]
    url = reverse("training:approve", args=[release.pk])
    client.force_login(consortium["people"]["lead_a"])
    run_page = client.get(reverse("training:detail", args=[release.run_id])).content.decode()
    assert f'href="{url}"' in run_page  # the run page leads to the confirmation

    page = client.get(url)
    assert page.status_code == 200 and CARD in page.content.decode()
    assert _state(release) == "pending"  # reading the card approves nothing

    refused = client.post(url)  # a plain POST, without the confirmation
    assert refused.status_code == 400 and CARD in refused.content.decode()
    assert client.post(url, {"confirm": "no"}).status_code == 400
    assert _state(release) == "pending" and not _events("release.approved", release).exists()

    done = client.post(url, {"confirm": "yes"})
    assert done.status_code == 302
    assert _state(release) == "approved"
    event = _events("release.approved", release).get()
    assert event.actor == consortium["people"]["lead_a"]
    assert event.inputs[0]["card_sha256"] == release.card_sha256


def test_withdrawal_needs_a_reason(client, consortium, releases):
    release = releases["approved"]
    url = reverse("training:withdraw", args=[release.pk])
    client.force_login(consortium["people"]["lead_a"])
    assert client.get(url).status_code == 200
    for data in ({}, {"reason": "   "}):
        response = client.post(url, data)
        assert response.status_code == 400
        assert "give the reason" in response.content.decode()
    assert _state(release) == "approved" and not _events("release.withdrawn", release).exists()
    # a pending release has nothing to withdraw
    assert client.post(reverse("training:withdraw", args=[releases["pending"].pk]),
                       {"reason": "x"}).status_code == 200
    assert _state(releases["pending"]) == "pending"


def test_a_withdrawn_release_refuses_every_file(client, consortium, releases):
    release = releases["approved"]
    analyst = consortium["people"]["analyst_a1"]
    urls = [reverse("training:release_file", args=["a1", release.pk, part])
            for part in RELEASE_PARTS]
    urls.append(reverse("lineage:prov", args=["release", release.pk]))
    client.force_login(analyst)
    for url in urls:  # before: every file is given out
        assert client.get(url).status_code == 200, url

    client.force_login(consortium["people"]["lead_a"])
    reason = "Trained on recordings later found mislabelled; use release 9 instead."
    response = client.post(reverse("training:withdraw", args=[release.pk]),
                           {"reason": reason})
    assert response.status_code == 302
    stored = ModelRelease.objects.get(pk=release.pk)
    assert stored.state == "withdrawn" and stored.withdrawal_reason == reason
    assert stored.withdrawn_by == consortium["people"]["lead_a"] and stored.withdrawn_at
    event = _events("release.withdrawn", release).get()
    assert event.params == {"reason": reason} and event.study.slug == "study-a"
    assert event.inputs[0]["model_sha256"] == release.model_sha256

    client.force_login(analyst)
    downloads = Event.objects.filter(verb="download").count()
    for url in urls:
        refused = client.get(url)
        assert refused.status_code == 410, url
        body = refused.content.decode()
        assert "was withdrawn" in body and reason in body and "lead_a" in body, url
    assert Event.objects.filter(verb="download").count() == downloads  # nothing given out

    listing = client.get(reverse("training:releases", args=["a1"])).content.decode()
    assert f"Release {release.pk}:" in listing and reason in listing
    assert reverse("training:release_file", args=["a1", release.pk, "model"]) not in listing
    client.force_login(consortium["people"]["lead_a"])
    run_page = client.get(reverse("training:detail", args=[release.run_id])).content.decode()
    assert reason in run_page and "withdrawn by the study lead" in run_page
    trail = client.get(reverse("audit:events"), {"kind": "training"}).content.decode()
    assert "release.withdrawn" in trail and reason in trail


def test_only_the_study_lead_approves_or_withdraws(client, consortium, releases):
    approve = reverse("training:approve", args=[releases["pending"].pk])
    withdraw = reverse("training:withdraw", args=[releases["approved"].pk])
    for who, status in (("analyst_a1", 403), ("dm_a1", 403), ("auditor_a", 403),
                        ("lead_b", 404)):
        client.force_login(consortium["people"][who])
        for url, data in ((approve, {"confirm": "yes"}), (withdraw, {"reason": "not mine"})):
            assert client.get(url).status_code == status, (who, url)
            assert client.post(url, data).status_code == status, (who, url)
    assert _state(releases["pending"]) == "pending"
    assert _state(releases["approved"]) == "approved"
    # and the study lead of A reaches nothing of study B's releases
    client.force_login(consortium["people"]["lead_a"])
    other = releases["other"]
    assert client.post(reverse("training:withdraw", args=[other.pk]),
                       {"reason": "not mine"}).status_code == 404
    assert _state(other) == "approved"
