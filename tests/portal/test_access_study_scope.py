"""Roles are held per (site, study): the holes found by trying the portal as an attacker
would, each reproduced here through the same commands and URLs a person uses."""

import io

import pytest
from django.core.management import call_command
from django.core.management.base import CommandError
from django.urls import reverse

from portal.accounts.models import Membership
from portal.accounts.permissions import Action, can
from portal.accounts.setup import add_site, add_study
from portal.training.models import ModelRelease
from tests.helpers import member
from tests.portal import objects

pytestmark = pytest.mark.django_db


def _command(*args):
    out = io.StringIO()
    call_command(*args, stdout=out)
    return out.getvalue()


def test_a_study_lead_of_a_side_study_cannot_download_the_first_studys_data(client):
    """The sequence from the report: a site joins a second study whose lead holds the role at
    another site of that study; the lead must not reach the first study's data."""
    _command("add_study", "main-study", "--name", "Main study")
    _command("add_site", "north-lab", "--study", "main-study", "--name", "North lab")
    _command("add_study", "side-study", "--name", "Side study")
    _command("add_site", "north-lab", "--study", "side-study", "--name", "North lab")
    _command("add_site", "lone-lab", "--study", "side-study", "--name", "Lone lab")
    _command("add_member", "lead-side", "--site", "lone-lab", "--role", "study_lead")
    from portal.accounts.models import Site, Study

    north = Site.objects.get(slug="north-lab")
    main_data = objects.fill(north, Study.objects.get(slug="main-study"), label="main")
    side_data = objects.fill(north, Study.objects.get(slug="side-study"), label="side")
    lead = member("lead-side", role="study_lead", site_slug="lone-lab")[0]
    client.force_login(lead)
    main_zip = reverse("datasets:download_version", args=[main_data["version_id"]])
    side_zip = reverse("datasets:download_version", args=[side_data["version_id"]])
    assert client.get(main_zip).status_code == 404
    assert client.get(side_zip).status_code == 200  # north-lab's data in the study they lead
    body = client.get(reverse("dashboard:site", args=["north-lab"])).content.decode()
    assert "side.zip" in body and "main.zip" not in body


def test_a_role_at_a_site_in_two_studies_must_name_its_study():
    add_study("one", name="One")
    add_study("two", name="Two")
    add_site("both-lab", study_slug="one", name="Both")
    add_site("both-lab", study_slug="two", name="Both")
    with pytest.raises(CommandError, match="several studies .*--study"):
        _command("add_member", "ana", "--site", "both-lab", "--role", "analyst")
    out = _command("add_member", "ana", "--site", "both-lab", "--study", "two",
                   "--role", "analyst")
    assert "in two" in out
    held = Membership.objects.get(user__username="ana")
    assert (held.site.slug, held.study.slug, held.role) == ("both-lab", "two", "analyst")
    add_study("three", name="Three")
    with pytest.raises(CommandError, match="does not take part in study 'three'"):
        _command("add_member", "ana", "--site", "both-lab", "--study", "three",
                 "--role", "analyst")


def test_a_study_wide_role_does_not_cross_into_the_sites_other_study():
    add_study("one", name="One")
    add_study("two", name="Two")
    shared, _ = add_site("shared", study_slug="one", name="Shared")
    add_site("shared", study_slug="two", name="Shared")
    other, _ = add_site("other", study_slug="two", name="Other")
    lead = member("lead-one", role="study_lead", site_slug="shared", study_slug="one")[0]
    one, two = shared.studies.get(slug="one"), shared.studies.get(slug="two")
    assert can(lead, Action.VIEW, site=shared, study=one)
    assert not can(lead, Action.VIEW, site=shared, study=two)
    assert not can(lead, Action.VIEW, site=other, study=two)
    assert can(lead, Action.EDIT_PROTOCOL, study=one)
    assert not can(lead, Action.EDIT_PROTOCOL, study=two)


def test_a_check_without_the_study_is_a_programming_error():
    """Every object check must name the study the object belongs to."""
    add_study("one", name="One")
    site, _ = add_site("lab", study_slug="one", name="Lab")
    person = member("ana", role="analyst", site_slug="lab")[0]
    with pytest.raises(ValueError, match="both the site and the study"):
        can(person, Action.VIEW, site=site)


@pytest.fixture
def two_sites(db):
    study, _ = add_study("study-a", name="Study A")
    a1, _ = add_site("a1", study_slug="study-a", name="Site A1")
    a2, _ = add_site("a2", study_slug="study-a", name="Site A2")
    data = {"a1": objects.fill(a1, study, label="a1"), "a2": objects.fill(a2, study, label="a2")}
    pooled = objects.feature_set_of(a1, study, [data["a1"]["objects"]["version"],
                                                data["a2"]["objects"]["version"]], tag="pooled")
    people = {"analyst_a1": member("analyst_a1", role="analyst", site_slug="a1")[0],
              "lead": member("lead", role="study_lead", site_slug="a2")[0]}
    return {"study": study, "a1": a1, "a2": a2, "data": data, "pooled": pooled,
            "people": people}


def test_a_site_only_release_of_another_site_is_not_downloadable(client, two_sites):
    """A release trained on a2's data only, from a run on the pooled set: a1's people may
    see neither its files nor its lineage, though a1's data is in the run's feature set."""
    run = objects.training_of(two_sites["study"], two_sites["pooled"],
                              trained_on_site=two_sites["a2"])
    release = run["release"]
    pooled_release = ModelRelease.objects.create(
        run=run["run"], model="lda", model_sha256=release.model_sha256, model_digest="6" * 64,
        card_sha256=release.card_sha256, spec_sha256=release.spec_sha256, state="approved",
        scores={}, kind="pooled")
    client.force_login(two_sites["people"]["analyst_a1"])
    for part in ("model", "card", "spec"):
        url = reverse("training:release_file", args=["a1", release.pk, part])
        assert client.get(url).status_code == 404, part
        url = reverse("training:release_file", args=["a1", pooled_release.pk, part])
        assert client.get(url).status_code == 200, part
    for view in ("lineage:page", "lineage:prov"):
        assert client.get(reverse(view, args=["release", release.pk])).status_code == 404
        assert client.get(reverse(view, args=["release", pooled_release.pk])).status_code == 200
    listing = client.get(reverse("training:releases", args=["a1"])).content.decode()
    assert f"release-{pooled_release.pk}" in listing or f"/{pooled_release.pk}/" in listing
    assert f"/{release.pk}/card" not in listing
    # the site it was trained on may fetch it
    client.force_login(member("analyst_a2", role="analyst", site_slug="a2")[0])
    url = reverse("training:release_file", args=["a2", release.pk, "card"])
    assert client.get(url).status_code == 200


def test_a_pooled_job_is_visible_exactly_when_its_object_is(client, two_sites):
    """A fold job of a run on the pooled set has no site: it carries scores of both sites,
    so a1's analyst (who may not see the pooled run) must not read it either way."""
    from portal.jobs.models import Job

    run = objects.training_of(two_sites["study"], two_sites["pooled"])["run"]
    job = Job.objects.get(pk=objects.job_about("training.fold", run, study=two_sites["study"]))
    Job.objects.filter(pk=job.pk).update(result={"balanced_accuracy": 0.61,
                                                 "test_sha256": "7" * 64})
    client.force_login(two_sites["people"]["analyst_a1"])
    for name in ("jobs:detail", "jobs:progress", "api:job"):
        response = client.get(reverse(name, args=[job.pk]))
        assert response.status_code == 404, name
        assert b"0.61" not in response.content
    assert client.get(reverse("training:detail", args=[run.pk])).status_code == 404
    own_job = two_sites["data"]["a1"]["jobs"]["upload"]
    assert client.get(reverse("api:job", args=[own_job])).status_code == 200
    client.force_login(two_sites["people"]["lead"])
    response = client.get(reverse("api:job", args=[job.pk]))
    assert response.status_code == 200 and response.json()["result"]["balanced_accuracy"] == 0.61


def test_a_job_without_a_target_is_for_operators_only(client, two_sites):
    from portal.jobs.models import Job

    probe = Job.objects.create(kind="probe", study=two_sites["study"], site=two_sites["a1"])
    client.force_login(two_sites["people"]["lead"])
    assert client.get(reverse("jobs:detail", args=[probe.pk])).status_code == 404
    client.force_login(member("root", role="operator")[0])
    assert client.get(reverse("jobs:detail", args=[probe.pk])).status_code == 200


def test_every_job_target_has_an_access_rule():
    """Each kind of object a job is queued about has a visibility rule, so no job falls back
    to "visible to nobody" (or worse) by accident."""
    import re
    from pathlib import Path

    from portal.jobs.access import TARGET_RULES

    root = Path(__file__).resolve().parents[2]
    kinds = set()
    for path in root.glob("portal/**/*.py"):
        kinds.update(re.findall(r'enqueue\("([a-z_.]+)", target=', path.read_text()))
    assert kinds, "no enqueue calls found"
    from portal.jobs.kinds import KINDS

    targets = {"upload.validate": "datasets.upload", "qc.version": "quality.qcround",
               "qc.recording": "datasets.recording", "features.set": "features.featureset",
               "features.recording": "datasets.recording",
               "features.combine": "features.featureset",
               "training.run": "training.trainingrun", "training.fold": "training.trainingrun",
               "training.finish": "training.trainingrun",
               "audit.reproduce": "lineage.reproduction"}
    assert kinds <= set(targets), f"jobs queued about objects this test does not know: " \
                                  f"{sorted(kinds - set(targets))}"
    assert set(targets) <= set(KINDS)
    for kind in kinds:
        assert targets[kind] in TARGET_RULES, kind
