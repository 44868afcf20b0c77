"""A job's page and the small progress fragment that pages poll."""

from django.http import JsonResponse
from django.shortcuts import render
from django.views.decorators.http import require_GET

from portal.accounts.permissions import access
from portal.jobs.access import visible_job


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
        "transient_failures": job.transient_failures,
        "progress": {"done": job.progress_done, "total": job.progress_total,
                     "note": job.progress_note},
        "error": job.error or None, "result": job.result,
        "created_at": job.created_at.isoformat(),
        "finished_at": job.finished_at.isoformat() if job.finished_at else None,
    }


@access("checked")
@require_GET
def api_job(request, job_id):
    return JsonResponse(job_json(visible_job(request.user, job_id)))
