"""Who may see training runs and use model releases.

A run is visible with its feature set (every site of it, in its study). A release is also
offered to a site whose data it was trained on: people who see that site in the run's study
may download an approved release for it, and a per-site release only for the site it was
trained on.
"""

from django.http import Http404
from django.shortcuts import get_object_or_404, render

from portal.accounts.permissions import Action, can, is_lead, visible_sites
from portal.features.access import may_see, set_sites
from portal.training.models import ModelRelease, ReleaseState, TrainingRun


def visible_run(user, run_id):
    run = get_object_or_404(TrainingRun.objects.select_related("study", "feature_set",
                                                               "created_by"), pk=run_id)
    sites = set_sites(run.feature_set)
    if not may_see(user, run.feature_set, sites):
        raise Http404("no such training run")
    return run, sites


def site_may_use(user, release, site, sites=None, action=Action.VIEW):
    """True if ``user`` may see (or, with DOWNLOAD, fetch) ``release`` for ``site``."""
    study = release.run.study_id
    if not can(user, action, site=site, study=study):
        return False
    if release.trained_on_site_id is not None and release.trained_on_site_id != site.pk:
        return False
    # a pending release is the study lead's; a withdrawn one stays listed (files refused)
    if release.state == ReleaseState.PENDING and not is_lead(user, study):
        return False
    sites = set_sites(release.run.feature_set) if sites is None else sites
    return site in sites


def release_sites(user, release):
    """The sites for which ``user`` may see ``release`` (maybe none)."""
    sites = set_sites(release.run.feature_set)
    candidates = visible_sites(user, release.run.study).filter(pk__in=[s.pk for s in sites])
    return [s for s in candidates if site_may_use(user, release, s, sites)]


def release_for_site(user, release_id, site):
    release = get_object_or_404(
        ModelRelease.objects.select_related("run__study", "run__feature_set",
                                            "trained_on_site"), pk=release_id)
    if not site_may_use(user, release, site):
        raise Http404("no such release")
    return release


def run_job_visible(user, target_id):
    run = TrainingRun.objects.filter(pk=target_id).select_related("feature_set").first()
    return run is not None and may_see(user, run.feature_set)


def refuse_withdrawn(request, release, what):
    """The answer to a request for a file of a withdrawn release (410 Gone, saying when, by
    whom and why), or None if the release is not withdrawn. Every release file view asks."""
    if release.state != ReleaseState.WITHDRAWN:
        return None
    return render(request, "training/withdrawn.html", {"release": release, "what": what},
                  status=410)


def summary_visible_runs(user, study):
    """The training runs of ``study`` on feature sets that pool data of a site the user
    sees with data of sites they do not (see
    :func:`portal.features.access.summary_visible_sets`): summaries only.
    [(run, its sites, the user's sites among them)]"""
    from portal.features.access import summary_visible_sets

    pooled = {fs.pk: (sites, mine) for fs, sites, mine in summary_visible_sets(user, study)}
    runs = study.training_runs.filter(feature_set_id__in=list(pooled))[:200]
    return [(run, *pooled[run.feature_set_id]) for run in runs]


def visible_run_summary(user, run_id):
    """(run, its sites, the user's sites among them) if the user sees at least one site of
    the run's feature set in its study; 404 otherwise."""
    from portal.features.access import summary_sites

    run = get_object_or_404(TrainingRun.objects.select_related("study", "feature_set"),
                            pk=run_id)
    sites = set_sites(run.feature_set)
    mine = summary_sites(user, run.feature_set, sites)
    if not mine:
        raise Http404("no such training run")
    return run, sites, mine
