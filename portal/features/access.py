"""Who may see and use feature sets: a set belongs to one study and pools the data of one or
more sites, so it is visible to those who see every one of its sites in that study."""

from django.http import Http404
from django.shortcuts import get_object_or_404

from portal.accounts.models import Site
from portal.accounts.permissions import Action, can
from portal.features.models import FeatureSet


def set_sites(feature_set):
    """The sites whose data the set holds, by slug."""
    return list(Site.objects.filter(versions__feature_sets=feature_set).distinct()
                .order_by("slug"))


def _all(user, action, feature_set, sites):
    sites = set_sites(feature_set) if sites is None else sites
    return bool(sites) and all(can(user, action, site=s, study=feature_set.study_id)
                               for s in sites)


def may_see(user, feature_set, sites=None):
    return _all(user, Action.VIEW, feature_set, sites)


def may_download(user, feature_set, sites=None):
    return _all(user, Action.DOWNLOAD, feature_set, sites)


def may_run_on(user, feature_set, sites=None):
    """Starting work on the set (training, computing it again): at every one of its sites."""
    return _all(user, Action.RUN_JOBS, feature_set, sites)


def visible_set(user, set_id):
    feature_set = get_object_or_404(FeatureSet.objects.select_related("study", "created_by"),
                                    pk=set_id)
    sites = set_sites(feature_set)
    if not may_see(user, feature_set, sites):
        raise Http404("no such feature set")
    return feature_set, sites


def set_job_visible(user, target_id):
    feature_set = FeatureSet.objects.filter(pk=target_id).first()
    return feature_set is not None and may_see(user, feature_set)


def sites_of_sets(sets):
    """{set id: its sites by slug} for many sets in one query."""
    out = {fs.pk: [] for fs in sets}
    links = (FeatureSet.versions.through.objects.filter(featureset_id__in=list(out))
             .select_related("datasetversion__site").order_by("datasetversion__site__slug"))
    for link in links:
        site = link.datasetversion.site
        if site not in out[link.featureset_id]:
            out[link.featureset_id].append(site)
    return out


def summary_sites(user, feature_set, sites=None):
    """The sites of ``feature_set`` whose data ``user`` sees in its study (maybe none)."""
    sites = set_sites(feature_set) if sites is None else sites
    return [s for s in sites if can(user, Action.VIEW, site=s, study=feature_set.study_id)]


def summary_visible_sets(user, study):
    """The feature sets of ``study`` that pool data of a site the user sees with data of
    sites they do not: shown to them as summaries only (which sites, counts per site, pooled
    figures), never in full. [(set, its sites, the user's sites among them)]"""
    sets = list(study.feature_sets.all()[:200])
    by_set = sites_of_sets(sets)
    out = []
    for feature_set in sets:
        sites = by_set[feature_set.pk]
        mine = summary_sites(user, feature_set, sites)
        if mine and len(mine) < len(sites):
            out.append((feature_set, sites, mine))
    return out


def visible_set_summary(user, set_id):
    """(set, its sites, the user's sites among them) if the user sees at least one of the
    set's sites in its study; 404 otherwise."""
    feature_set = get_object_or_404(FeatureSet.objects.select_related("study"), pk=set_id)
    sites = set_sites(feature_set)
    mine = summary_sites(user, feature_set, sites)
    if not mine:
        raise Http404("no such feature set")
    return feature_set, sites, mine
