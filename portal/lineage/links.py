"""The pages the audit trail links an event's object to, each behind its app's access rule.

Registered with portal.audit.links when the apps are ready (the audit app imports no other
app). Every resolver answers for a whole page of events in one or two queries, whatever the
number of objects, and asks the owning app's rule (portal/<app>/access.py) with the user's
scope read once per request. No link for what the reader may not see.
"""

from collections import defaultdict

from django.urls import reverse

from portal.accounts.models import Site, Study
from portal.accounts.permissions import scope_of
from portal.datasets.access import upload_visible, version_visible, visible_recordings
from portal.datasets.models import DatasetVersion, Upload
from portal.features.access import may_see
from portal.features.models import FeatureSet
from portal.quality.access import round_visible
from portal.quality.models import QCRound, QCRun
from portal.studies.models import ProtocolVersion
from portal.training.access import site_may_use
from portal.training.models import ModelRelease, TrainingRun


def _set_sites(set_ids):
    """{feature set id: [Site with pk and slug]} in one query."""
    out = defaultdict(list)
    rows = (Site.objects.filter(versions__feature_sets__in=set_ids)
            .values_list("versions__feature_sets", "pk", "slug").distinct().order_by("slug"))
    for set_id, pk, slug in rows:
        out[set_id].append(Site(pk=pk, slug=slug))
    return out


def uploads(user, ids):
    return {u.pk: reverse("datasets:upload", args=[u.pk])
            for u in Upload.objects.filter(pk__in=ids).only("site_id", "study_id")
            if upload_visible(user, u)}


def versions(user, ids):
    return {v.pk: reverse("datasets:version", args=[v.pk])
            for v in DatasetVersion.objects.filter(pk__in=ids).only("site_id", "study_id")
            if version_visible(user, v)}


def rounds(user, ids):
    return {r.pk: reverse("quality:round", args=[r.pk])
            for r in QCRound.objects.filter(pk__in=ids).select_related("version")
            if round_visible(user, r)}


def qc_results(user, ids):
    """A stored quality result is visible through any recording the reader sees holding
    its file at its site (portal.quality.access.qc_run_visible), asked for all at once; it
    links to what was made from it."""
    found = list(QCRun.objects.filter(pk__in=ids).values_list("pk", "site_id",
                                                              "recording_sha256"))
    seen = set(visible_recordings(user).filter(
        sha256__in={sha for _, _, sha in found}).values_list("version__site_id", "sha256"))
    return {pk: reverse("lineage:derived", args=["qc", pk]) for pk, site_id, sha in found
            if (site_id, sha) in seen}


def feature_sets(user, ids):
    sets = list(FeatureSet.objects.filter(pk__in=ids).only("study_id"))
    sites = _set_sites([s.pk for s in sets])
    return {s.pk: reverse("features:detail", args=[s.pk]) for s in sets
            if may_see(user, s, sites.get(s.pk, []))}


def runs(user, ids):
    found = list(TrainingRun.objects.filter(pk__in=ids).select_related("feature_set"))
    sites = _set_sites([r.feature_set_id for r in found])
    return {r.pk: reverse("training:detail", args=[r.pk]) for r in found
            if may_see(user, r.feature_set, sites.get(r.feature_set_id, []))}


def releases(user, ids):
    """A release links to its run's page for those who see the whole feature set, else to
    the release list of the first site it is offered to for the reader."""
    found = list(ModelRelease.objects.filter(pk__in=ids).select_related("run__feature_set"))
    sites = _set_sites([r.run.feature_set_id for r in found])
    out = {}
    for release in found:
        held = sites.get(release.run.feature_set_id, [])
        if may_see(user, release.run.feature_set, held):
            out[release.pk] = reverse("training:detail", args=[release.run_id])
            continue
        mine = [s for s in held if site_may_use(user, release, s, held)]
        if mine:
            out[release.pk] = reverse("training:releases", args=[mine[0].slug])
    return out


def protocols(user, ids):
    scope = scope_of(user)
    return {pk: reverse("studies:protocol", args=[slug])
            for pk, study_id, slug in ProtocolVersion.objects.filter(pk__in=ids)
            .values_list("pk", "study_id", "study__slug")
            if scope.operator or study_id in scope.studies()}


def sites(user, ids):
    scope = scope_of(user)
    return {pk: reverse("dashboard:site", args=[slug])
            for pk, slug in Site.objects.filter(pk__in=ids).values_list("pk", "slug")
            if scope.operator or pk in scope.sites()}


def studies(user, ids):
    scope = scope_of(user)
    return {pk: reverse("dashboard:study", args=[slug])
            for pk, slug in Study.objects.filter(pk__in=ids).values_list("pk", "slug")
            if scope.operator or pk in scope.studies()}


def jobs(user, ids):
    """A job's page follows its target's rule, one check per job: linked for operators
    only here, so the page's query count stays fixed."""
    if not scope_of(user).operator:
        return {}
    return {pk: reverse("jobs:detail", args=[pk]) for pk in ids}


RESOLVERS = {
    "datasets.upload": uploads,
    "datasets.datasetversion": versions,
    "quality.qcround": rounds,
    "quality.qcrun": qc_results,
    "features.featureset": feature_sets,
    "training.trainingrun": runs,
    "training.modelrelease": releases,
    "studies.protocolversion": protocols,
    "accounts.site": sites,
    "accounts.study": studies,
    "jobs.job": jobs,
}


def register_all():
    from portal.audit.links import register

    for target_type, resolver in RESOLVERS.items():
        register(target_type, resolver)
