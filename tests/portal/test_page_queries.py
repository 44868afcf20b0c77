"""Every main page renders with a fixed number of database queries, whatever the study's
size: the same count for an invented study of 100 recordings and one of 1,000 (three sites
each), pinned so that a change which adds a query per row shows up here.

Plumbing on invented rows (portal.dashboard.bulk): nothing of the science is checked here.
"""

import pytest
from django.urls import reverse

from portal.dashboard.bulk import make_study
from portal.datasets.models import DatasetVersion
from portal.features.models import FeatureSet
from portal.quality.models import QCRound
from portal.training.models import TrainingRun

pytestmark = pytest.mark.django_db

# Queries per page (the user's row included; the session comes from the web process's
# memory), the same at both sizes.
PINNED = {
    "home": 3,
    "study overview": 19,
    "site page": 13,
    "quality round": 14,
    "recording quality": 10,
    "feature set": 31,
    "training run": 24,
    "site releases": 8,
    "audit trail": 5,
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
    }


def counts(client, urls):
    from django.db import connection
    from django.test.utils import CaptureQueriesContext

    out = {}
    for name, url in urls.items():
        assert client.get(url).status_code == 200, name  # warm caches (content types)
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
    # And pinned the way Django's own check does it, on the large study's overview.
    client.force_login(large["users"]["lead"])
    url = reverse("dashboard:study", args=[large["study"].slug])
    with django_assert_num_queries(PINNED["study overview"]):
        client.get(url)
