"""The first pages a person sees: their studies and sites, and each site's uploads."""

from django.core.paginator import Paginator
from django.db.models import Count, Max, Q
from django.http import JsonResponse
from django.shortcuts import render

from portal.accounts.models import STUDY_WIDE_ROLES
from portal.accounts.permissions import (
    Action,
    access,
    can,
    get_visible_site,
    get_visible_study,
    is_operator,
    study_roles,
    visible_sites,
    visible_studies,
)
from portal.datasets.models import Upload, UploadState
from portal.jobs.models import Job

PAGE_SIZE = 25


def _site_rows(sites, study=None):
    """Sites with their upload counts (within ``study`` if given), in one query."""
    in_study = Q(uploads__study=study) if study is not None else Q()
    return sites.annotate(
        n_participants=Count("participants", distinct=True),
        n_uploads=Count("uploads", filter=in_study, distinct=True),
        n_waiting=Count("uploads", filter=in_study & Q(uploads__state__in=[
            UploadState.QUEUED, UploadState.VALIDATING]), distinct=True),
        n_rejected=Count("uploads", filter=in_study & Q(uploads__state=UploadState.REJECTED),
                         distinct=True),
        last_upload=Max("uploads__created_at", filter=in_study),
    ).order_by("slug")


@access("checked")
def home(request):
    studies = visible_studies(request.user).order_by("slug")
    sites = visible_sites(request.user)
    return render(request, "dashboard/home.html", {
        "studies": studies, "sites": _site_rows(sites),
    })


def _uploads_with_jobs(uploads):
    page_jobs = {
        job.target_id: job for job in Job.objects.filter(
            target_type="datasets.upload", target_id__in=[str(u.pk) for u in uploads]
        ).order_by("created_at")
    }
    for upload in uploads:
        upload.job = page_jobs.get(str(upload.pk))
    return uploads


@access("checked")
def study_overview(request, study_slug):
    study = get_visible_study(request.user, study_slug)
    sites = visible_sites(request.user).filter(studies=study)
    uploads = Paginator(
        Upload.objects.filter(study=study, site__in=sites).select_related("site"), PAGE_SIZE
    ).get_page(request.GET.get("page"))
    _uploads_with_jobs(uploads.object_list)
    whole = is_operator(request.user) or bool(study_roles(request.user, study) & STUDY_WIDE_ROLES)
    return render(request, "dashboard/study.html", {
        "study": study, "sites": _site_rows(sites, study),
        "uploads": uploads, "whole_study": whole,
    })


@access("checked")
def site_page(request, site_slug):
    site = get_visible_site(request.user, site_slug)
    uploads = Paginator(
        Upload.objects.filter(site=site).select_related("study"), PAGE_SIZE
    ).get_page(request.GET.get("page"))
    _uploads_with_jobs(uploads.object_list)
    return render(request, "dashboard/site.html", {
        "site": site, "uploads": uploads,
        "may_upload": can(request.user, Action.UPLOAD, site=site),
        "versions": site.versions.select_related("study")
        .annotate(n_recordings=Count("recordings"))[:20],
    })


@access("checked")
def api_me(request):
    sites = visible_sites(request.user)
    return JsonResponse({
        "username": request.user.get_username(),
        "operator": is_operator(request.user),
        "roles": [
            {"site": m.site.slug, "role": m.role}
            for m in request.user.memberships.select_related("site")
        ],
        "visible_sites": list(sites.values_list("slug", flat=True)),
        "visible_studies": list(visible_studies(request.user).values_list("slug", flat=True)),
    })
