"""A job's page and the small progress fragment that pages poll."""

from django.http import Http404, JsonResponse
from django.shortcuts import get_object_or_404, render

from portal.accounts.permissions import Action, access, can, is_operator
from portal.jobs.models import Job


def visible_job(user, job_id):
    job = get_object_or_404(Job.objects.select_related("site", "study"), pk=job_id)
    if job.site is None:
        if not is_operator(user) and not (job.study and can(user, Action.VIEW, study=job.study)):
            raise Http404("no such job")
    elif not can(user, Action.VIEW, site=job.site):
        raise Http404("no such job")
    return job


@access("checked")
def job_detail(request, job_id):
    job = visible_job(request.user, job_id)
    return render(request, "jobs/job.html", {"job": job})


@access("checked")
def job_progress(request, job_id):
    """The progress bar alone (HTML for htmx) — polled while the job is active."""
    job = visible_job(request.user, job_id)
    return render(request, "jobs/_progress.html", {"job": job})


def job_json(job):
    return {
        "id": job.pk, "kind": job.kind, "state": job.state, "attempts": job.attempts,
        "progress": {"done": job.progress_done, "total": job.progress_total,
                     "note": job.progress_note},
        "error": job.error or None, "result": job.result,
        "created_at": job.created_at.isoformat(),
        "finished_at": job.finished_at.isoformat() if job.finished_at else None,
    }


@access("checked")
def api_job(request, job_id):
    return JsonResponse(job_json(visible_job(request.user, job_id)))
