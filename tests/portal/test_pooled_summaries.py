"""A pooled feature set and training run, seen from one of their sites: the site's people
read summaries (sites, counts per site, pooled scores, dates) and nothing more. Plumbing on
invented rows (tests/portal/objects.py): nothing of the science is checked here."""

import pytest
from django.urls import reverse

from portal.features.access import summary_visible_sets
from portal.training.access import summary_visible_runs
from tests.portal import objects

pytestmark = pytest.mark.django_db


@pytest.fixture
def pooled(consortium):
    """A set and run over sites a1 and a2 of study A, with one recording from each."""
    from portal.accounts.models import Study
    from portal.datasets.models import DatasetVersion, Recording
    from portal.features.models import FeatureSetItem
    from portal.quality.models import QCRun

    study = Study.objects.get(slug="study-a")
    sites = consortium["sites"]
    own = objects.fill(sites["a1"], study, label="pool-a1")
    other = objects.fill(sites["a2"], study, label="pool-a2")
    versions = list(DatasetVersion.objects.filter(pk__in=[own["version_id"],
                                                          other["version_id"]]))
    feature_set = objects.feature_set_of(sites["a1"], study, versions, tag="pool-both")
    for data in (own, other):
        FeatureSetItem.objects.create(
            feature_set=feature_set, recording=Recording.objects.get(pk=data["recording_id"]),
            qc_run=QCRun.objects.get(pk=data["run_id"]), input_digest="6" * 64, inputs={})
    made = objects.training_of(study, feature_set)
    run = made["run"]
    run.results = {"release_model": "lda", "models": {"lda": {
        "pooled": {"balanced_accuracy": 0.6125, "macro_f1": 0.58, "kappa": 0.21},
        "ci": {"low": 0.55, "high": 0.67}, "chance": {"balanced_accuracy": 0.5},
        "per_fold": {"balanced_accuracy": {"mean": 0.6, "sd": 0.1}}}}}
    run.save()
    return {"set": feature_set, "run": run, "study": study, "own": own,
            "people": consortium["people"], "sites": sites}


def test_the_rule_offers_pooled_objects_to_the_sites_in_them(pooled):
    people, study = pooled["people"], pooled["study"]
    analyst = people["analyst_a1"]
    assert [(fs.pk, [s.slug for s in sites], [s.slug for s in mine])
            for fs, sites, mine in summary_visible_sets(analyst, study)] == [
        (pooled["set"].pk, ["a1", "a2"], ["a1"])]
    assert [run.pk for run, _, _ in summary_visible_runs(analyst, study)] == [pooled["run"].pk]
    # whoever sees every site sees the objects in full, not as summaries
    assert summary_visible_sets(people["lead_a"], study) == []
    # a site of another study is in no pooled object of study A
    assert summary_visible_runs(people["dm_b1"], study) == []


def test_a_site_analyst_reads_the_summary_and_nothing_more(client, pooled):
    client.force_login(pooled["people"]["analyst_a1"])
    run, feature_set = pooled["run"], pooled["set"]
    body = client.get(reverse("training:study", args=["study-a"])).content.decode()
    assert "No training runs yet" not in body
    assert reverse("training:summary", args=[run.pk]) in body
    body = client.get(reverse("features:study", args=["study-a"])).content.decode()
    assert reverse("features:summary", args=[feature_set.pk]) in body

    page = client.get(reverse("training:summary", args=[run.pk]))
    assert page.status_code == 200
    text = page.content.decode()
    assert "0.613 (0.550–0.670)" in text and "lda" in text
    for slug in ("a1", "a2"):
        row = text[text.index(f"({slug})"):]
        row = row[:row.index("</tr>")]
        assert row.count('<td class="num">1</td>') == 2, row  # one recording, one participant
    assert feature_set.table_sha256 not in text and run.spec_digest not in text
    assert pooled["own"]["label"] not in text  # no file or upload names
    assert client.get(reverse("features:summary", args=[feature_set.pk])).status_code == 200

    for name, args in [("training:detail", [run.pk]), ("features:detail", [feature_set.pk]),
                       ("features:download", [feature_set.pk, "csv"]),
                       ("training:plot", [run.pk]),
                       ("lineage:page", ["training", run.pk]),
                       ("lineage:prov", ["features", feature_set.pk])]:
        assert client.get(reverse(name, args=args)).status_code == 404, name


def test_people_of_other_studies_get_no_summary(client, pooled):
    client.force_login(pooled["people"]["dm_b1"])
    assert client.get(reverse("training:summary", args=[pooled["run"].pk])).status_code == 404
    assert client.get(reverse("features:summary", args=[pooled["set"].pk])).status_code == 404
