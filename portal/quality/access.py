"""Who may see quality rounds and results. A round belongs to a dataset version's (site,
study); a stored result (QCRun) is shared by every version holding the same file at the same
site, so it is visible through any of them the user may see."""

from django.http import Http404
from django.shortcuts import get_object_or_404

from portal.accounts.permissions import Action, can
from portal.datasets.access import visible_recordings
from portal.datasets.models import Recording
from portal.quality.models import QCRound, QCRun


def round_visible(user, qc_round):
    return can(user, Action.VIEW, site=qc_round.version.site_id,
               study=qc_round.version.study_id)


def visible_round(user, round_id):
    qc_round = get_object_or_404(
        QCRound.objects.select_related("version__site", "version__study"), pk=round_id)
    if not round_visible(user, qc_round):
        raise Http404("no such quality round")
    return qc_round


def recording_in_round(user, round_id, recording_id):
    qc_round = visible_round(user, round_id)
    recording = get_object_or_404(Recording, pk=recording_id, version=qc_round.version)
    return qc_round, recording


def versions_holding(run, user, action=Action.VIEW):
    """The recordings (in versions the user reaches) whose file this result checked."""
    return visible_recordings(user, action).filter(version__site_id=run.site_id,
                                                   sha256=run.recording_sha256)


def qc_run_visible(user, run, action=Action.VIEW):
    return versions_holding(run, user, action).exists()


def visible_qc_run(user, run_id):
    run = get_object_or_404(QCRun.objects.select_related("site"), pk=run_id)
    if not qc_run_visible(user, run):
        raise Http404("no such quality result")
    return run


def may_decide_channels(user, qc_round):
    """Setting a channel good or bad, or running the checks again: work at the round's
    (site, study)."""
    return can(user, Action.RUN_JOBS, site=qc_round.version.site_id,
               study=qc_round.version.study_id)


def round_job_visible(user, target_id):
    qc_round = QCRound.objects.filter(pk=target_id).select_related("version").first()
    return qc_round is not None and round_visible(user, qc_round)
