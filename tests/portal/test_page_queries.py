"""Every main page renders with a fixed number of database queries, whatever the study's
size: the same count for an invented study of 100 recordings and one of 1,000 (three sites
each), pinned so that a change which adds a query per row shows up here.

Plumbing on invented rows (portal.demo.bulk): nothing of the science is checked here.
"""

import pytest
from django.urls import reverse

from portal.datasets.models import DatasetVersion
from portal.demo.bulk import make_study
from portal.features.models import FeatureSet
from portal.quality.models import QCRound
from portal.training.models import TrainingRun

pytestmark = pytest.mark.django_db

# Queries per page with every cache empty (session and user rows included), the same at both
# sizes.
PINNED = {
    # Measured on PostgreSQL after access became per (site, study): a user's scope is read
    # once per request (two queries: the user's memberships, and which sites take part in
    # those studies), then each object check answers from it without a query of its own.
    "home": 6,
    "study overview": 24,
    "site page": 16,
    "quality round": 12,
    "recording quality": 10,
    "feature set": 13,
    "training run": 9,
    "site releases": 8,
    # one more than the list itself: the site filter lists the reader's sites (links to
    # the events' objects take a query or two per kind of object, never per event)
    "audit trail": 9,
    # the PROV document is built once: a query or two per dataset version (its files, its
    # parent, counts of a summarised one), one for the set's items with their quality
    # results, none per file or recording; the page then shows one line per site
    "lineage": 33,
}


def pages(study):
    site = study.sites.order_by("slug").first()
    version = DatasetVersion.objects.filter(site=site, study=study).order_by("-number").first()
    qc_round = QCRound.objects.filter(version=version).order_by("-id").first()
    recording = version.recordings.order_by("path").first()
    feature_set = FeatureSet.objects.filter(study=study).order_by("id").first()
    run = TrainingRun.objects.filter(study=study).order_by("id").first()
    return {
        "home": reverse("dashboard:home"),
        "study overview": reverse("dashboard:study", args=[study.slug]),
        "site page": reverse("dashboard:site", args=[site.slug]),
        "quality round": reverse("quality:round", args=[qc_round.pk]),
        "recording quality": reverse("quality:recording", args=[qc_round.pk, recording.pk]),
        "feature set": reverse("features:detail", args=[feature_set.pk]),
        "training run": reverse("training:detail", args=[run.pk]),
        "site releases": reverse("training:releases", args=[site.slug]),
        "audit trail": reverse("audit:events"),
        "lineage": reverse("lineage:page", args=["training", run.pk]),
    }


def counts(client, urls):
    from django.core.cache import cache
    from django.db import connection
    from django.test.utils import CaptureQueriesContext

    out = {}
    for name, url in urls.items():
        assert client.get(url).status_code == 200, name  # warm caches (content types)
        cache.clear()  # the numbers and figures computed afresh, as for new data
        with CaptureQueriesContext(connection) as captured:
            response = client.get(url)
        assert response.status_code == 200, name
        out[name] = len(captured.captured_queries)
    return out


def test_page_query_counts_do_not_grow_with_the_study(client, django_assert_num_queries):
    small = make_study(100, slug="small", seed=1)
    large = make_study(1000, slug="large", seed=2)
    assert large["counts"]["recordings"] == 10 * small["counts"]["recordings"]
    seen = {}
    for made in (small, large):
        client.force_login(made["users"]["lead"])
        seen[made["study"].slug] = counts(client, pages(made["study"]))
    assert seen["small"] == seen["large"], seen
    assert seen["large"] == PINNED, seen["large"]
    # And pinned the way Django's own check does it, on the large study's overview; for
    # unchanged data the overview's numbers come from the cache, after three cheap queries
    # that tell whether anything changed (and the session from the process's memory).
    from django.core.cache import cache

    client.force_login(large["users"]["lead"])
    url = reverse("dashboard:study", args=[large["study"].slug])
    cache.clear()
    with django_assert_num_queries(PINNED["study overview"]):
        client.get(url)
    with django_assert_num_queries(PINNED["study overview"] - 9):
        client.get(url)


def test_the_overview_numbers_follow_new_data(client):
    """The cached numbers are keyed by what they depend on: a new rejected upload shows at
    once in the uploads-per-week figure (drawn from the cached numbers)."""
    import re

    from portal.datasets.models import Upload

    made = make_study(24, slug="follow", seed=3)
    client.force_login(made["users"]["lead"])
    url = reverse("dashboard:study", args=["follow"])
    site = made["sites"][0]

    def rejected_cell():
        body = client.get(url).content.decode()
        chart = body[body.index('id="uploads-time"'):]
        chart = chart[:chart.index("</section>")]
        return re.search(r">rejected (\d+)<", chart).group(1)

    before = int(rejected_cell())
    assert int(rejected_cell()) == before  # from the cache
    Upload.objects.create(site=site, study=made["study"], source="web", label="again.zip",
                          state="rejected", errors=[{"path": "x", "message": "invented"}])
    assert int(rejected_cell()) == before + 1


def test_the_site_page_lists_the_approved_releases_of_its_data(client):
    """Plumbing on invented rows: a site sees the approved pooled release trained with its
    data, not the one awaiting approval."""
    from portal.training.models import ModelRelease

    made = make_study(24, slug="shelf", seed=4)
    site = made["sites"][0]
    approved = ModelRelease.objects.filter(run__study=made["study"], state="approved")
    pending = ModelRelease.objects.filter(run__study=made["study"], state="pending")
    assert approved.exists() and pending.exists()
    client.force_login(made["users"]["data_managers"][site.slug])
    body = client.get(reverse("dashboard:site", args=[site.slug])).content.decode()
    for release in approved:
        assert f"Release {release.pk}:" in body
    for release in pending:
        assert f"Release {release.pk}:" not in body
