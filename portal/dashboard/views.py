"""The first pages a person sees: their studies and sites, and each site's uploads."""

from django.core.paginator import Paginator
from django.db.models import Count, Max, Q
from django.http import JsonResponse
from django.shortcuts import render
from django.views.decorators.http import require_GET

from portal.accounts.permissions import (
    access,
    get_visible_site,
    get_visible_study,
    is_operator,
    pairs_q,
    sees_whole_study,
    visible_sites,
    visible_studies,
    visible_studies_at,
)
from portal.datasets.access import upload_studies
from portal.datasets.models import Recording, Upload, UploadState
from portal.jobs.models import Job
from portal.words import words

PAGE_SIZE = 25
SVG_CACHE_S = 24 * 3600


def cached_svg(kind, draw, *args, **kwargs):
    """An inline figure drawn once per content: the cache key is the sha256 of what is
    drawn (the numbers and labels), so new numbers give a new figure and nothing goes stale."""
    import hashlib

    from django.core.cache import cache

    payload = repr((kind, args, sorted(kwargs.items())))  # dicts keep their order
    key = f"cairn-svg-{hashlib.sha256(payload.encode()).hexdigest()}"
    svg = cache.get(key)
    if svg is None:
        svg = draw(*args, **kwargs)
        cache.set(key, svg, SVG_CACHE_S)
    return svg


def _site_rows(sites, user, study=None):
    """Sites with their participant and upload counts, in one query: within ``study`` if
    given, else within every study where the user sees the site."""
    if study is not None:
        in_study = Q(uploads__study=study)
        people = Q(participants__recordings__version__study=study)
    else:
        in_study = pairs_q(user, site="uploads__site", study="uploads__study")
        people = pairs_q(user, site="participants__recordings__version__site",
                         study="participants__recordings__version__study")
    return sites.annotate(
        n_participants=Count("participants", filter=people, distinct=True),
        n_uploads=Count("uploads", filter=in_study, distinct=True),
        n_waiting=Count("uploads", filter=in_study & Q(uploads__state__in=[
            UploadState.QUEUED, UploadState.VALIDATING]), distinct=True),
        n_rejected=Count("uploads", filter=in_study & Q(uploads__state__in=[
            UploadState.REJECTED, UploadState.FAILED]),
                         distinct=True),
        last_upload=Max("uploads__created_at", filter=in_study),
    ).order_by("slug")


@access("checked")
def home(request):
    studies = visible_studies(request.user).order_by("slug")
    sites = visible_sites(request.user)
    return render(request, "dashboard/home.html", {
        "studies": studies, "sites": _site_rows(sites, request.user),
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


SITE_SORTS = {"site": lambda r: r["site"].name.lower(),
              "participants": lambda r: r["site"].n_participants,
              "recordings": lambda r: r["recordings"],
              "last-upload": lambda r: r["site"].last_upload.timestamp()
              if r["site"].last_upload else 0,
              "waiting": lambda r: r["site"].n_waiting,
              "rejected": lambda r: r["site"].n_rejected,
              "usable": lambda r: r["numbers"]["shares"]["pass"] or 0,
              "bad-channels": lambda r: r["numbers"]["bad_channel_share"] or 0,
              "rejected-time": lambda r: r["numbers"]["rejected_share"] or 0}


def sort_rows(rows, key, sorts, default):
    """Rows sorted by ``key`` (a name of ``sorts``, "-" first for descending)."""
    name = (key or default).lstrip("-")
    if name not in sorts:
        name, key = default.lstrip("-"), default
    return sorted(rows, key=sorts[name], reverse=(key or default).startswith("-")), \
        (key or default)


def _comparisons(study, visible_ids, limit=5):
    """The newest finished runs of several models the reader may open, with the best
    model's per-fold balanced accuracy (mean ± SD over folds)."""
    from portal.training.models import RunState, TrainingRun

    out = []
    runs = (TrainingRun.objects.filter(study=study, state=RunState.DONE)
            .select_related("feature_set").prefetch_related("feature_set__versions")
            .order_by("-finished_at", "-id")[:limit * 4])
    for run in runs:
        sites = {v.site_id for v in run.feature_set.versions.all()}
        models = run.results.get("models", {})
        if not sites or not sites <= visible_ids or len(models) < 2:
            continue
        best = run.results.get("release_model") or max(
            models, key=lambda m: models[m]["per_fold"]["balanced_accuracy"]["mean"])
        result = models.get(best, {})
        out.append({"run": run, "best": best, "n_models": len(models),
                    "ba": result.get("per_fold", {}).get("balanced_accuracy", {}),
                    "chance": result.get("chance", {}).get("balanced_accuracy"),
                    "scheme": run.spec.get("validation", {}).get("scheme", "")})
        if len(out) == limit:
            break
    return out


def _latest_feature_set(study, visible_ids):
    from portal.features.models import FeatureSet, FeatureSetState

    for feature_set in (FeatureSet.objects.filter(study=study, state=FeatureSetState.DONE)
                        .prefetch_related("versions").order_by("-finished_at", "-id")[:5]):
        sites = {v.site_id for v in feature_set.versions.all()}
        if sites and sites <= visible_ids:
            return feature_set
    return None


@access("checked")
def study_overview(request, study_slug):
    from django.utils import timezone

    from portal.dashboard import charts, headplot
    from portal.dashboard.overview import cached_study_numbers

    study = get_visible_study(request.user, study_slug)
    sites = list(_site_rows(visible_sites(request.user, study), request.user, study))
    visible_ids = {s.pk for s in sites}
    numbers = cached_study_numbers(study, visible_ids, now=timezone.now())
    rows = []
    for site in sites:
        n = numbers["sites"][site.pk]
        version = n["version"]
        rows.append({
            "site": site, "numbers": n, "version": version,
            "recordings": version.n_recordings if version else 0,
            "verdict_bar": cached_svg("share", charts.share_bar, _verdict_words(n["verdicts"]),
                                      label=f"{site.name}: verdicts"),
            "head": cached_svg("head", headplot.head_svg, dict(sorted(
                n["channels_flagged"].items())), label=site.name, size_px=200)
            if n["channels_flagged"] else "",
        })
    rows, sort = sort_rows(rows, request.GET.get("sort"), SITE_SORTS, "site")
    whole = sees_whole_study(request.user, study)
    weeks = sorted({w for series in numbers["upload_weeks"].values() for w in series}
                   | {w for series in numbers["verdict_weeks"].values() for w in series})
    feature_set = _latest_feature_set(study, visible_ids)
    uploads = Paginator(Upload.objects.filter(study=study, site_id__in=visible_ids)
                        .select_related("site"), PAGE_SIZE).get_page(request.GET.get("page"))
    _uploads_with_jobs(uploads.object_list)
    return render(request, "dashboard/study.html", {
        "study": study, "rows": rows, "sort": sort, "whole_study": whole,
        "upload_chart": cached_svg("weeks", charts.weekly_bars, weeks, numbers["upload_weeks"],
                                   label="Uploads per week, by outcome", unit="uploads"),
        "verdict_chart": cached_svg("weeks", charts.weekly_bars, weeks,
                                    _verdict_words(numbers["verdict_weeks"]),
                                    label="Quality verdicts per week",
                                    unit="recordings"),
        "feature_set": feature_set,
        "effects": feature_set.site_effects if feature_set else None,
        "comparisons": _comparisons(study, visible_ids),
        "uploads": uploads,
    })


def _verdict_words(by_verdict):
    """{verdict: value} with the verdicts in words ("usable", "needs a look", "not usable"),
    as the charts name their parts."""
    return {words(verdict, "verdict"): value for verdict, value in by_verdict.items()}


UPLOAD_SORTS = {"received": "created_at", "state": "state", "size": "archive_bytes",
                "name": "label"}
REVIEW_SORTS = {"path": "path", "verdict": "verdict", "bad-channels": "n_bad",
                "rejected-time": "rejected"}


def order_by_param(queryset, key, sorts, default):
    """A queryset ordered by ``?sort=`` (a name of ``sorts``, "-" first for descending)."""
    key = key or default
    name = key.lstrip("-")
    if name not in sorts:
        key, name = default, default.lstrip("-")
    field = sorts[name]
    return queryset.order_by(("-" if key.startswith("-") else "") + field, "-pk"), key


@access("checked")
def site_page(request, site_slug):
    from portal.dashboard.overview import latest_rounds, needing_review
    from portal.quality.models import ChannelOverride
    from portal.training.models import ModelRelease, ReleaseState

    site = get_visible_site(request.user, site_slug)
    studies = list(visible_studies_at(request.user, site).values_list("pk", flat=True))
    uploads, upload_sort = order_by_param(
        Upload.objects.filter(site=site, study__in=studies).select_related("study"),
        request.GET.get("sort"), UPLOAD_SORTS, "-received")
    uploads = Paginator(uploads, PAGE_SIZE).get_page(request.GET.get("page"))
    _uploads_with_jobs(uploads.object_list)
    versions = list(site.versions.filter(study__in=studies).select_related("study").annotate(
        n_recordings=Count("recordings")).order_by("-created_at", "-id")[:20])
    latest = {}
    for version in versions:
        latest.setdefault(version.study_id, version)
    rounds = latest_rounds(v.pk for v in latest.values())
    review_rows, review_sort, review_round = None, "", None
    if latest:
        version = max(latest.values(), key=lambda v: (v.created_at, v.pk))
        review_round = rounds.get(version.pk)
        if review_round is not None:
            queryset, review_sort = order_by_param(
                needing_review(site, version, review_round), request.GET.get("review_sort"),
                REVIEW_SORTS, "verdict")
            review_rows = Paginator(queryset, PAGE_SIZE).get_page(
                request.GET.get("review_page"))
    seen_files = Recording.objects.filter(version__site=site, version__study__in=studies)
    overrides = Paginator(ChannelOverride.objects.filter(
        site=site, recording_sha256__in=seen_files.values("sha256")).select_related(
        "created_by"), PAGE_SIZE).get_page(request.GET.get("override_page"))
    from portal.features.models import FeatureSet

    releases = list(ModelRelease.objects.filter(
        run__feature_set__in=FeatureSet.objects.filter(versions__site=site).values("pk"),
        run__study__in=studies, state=ReleaseState.APPROVED).filter(
        Q(trained_on_site__isnull=True) | Q(trained_on_site=site))
        .select_related("run").order_by("-created_at", "-id")[:10])
    return render(request, "dashboard/site.html", {
        "site": site, "uploads": uploads, "upload_sort": upload_sort,
        "may_upload": upload_studies(request.user, site).exists(),
        "versions": versions, "review": review_rows, "review_sort": review_sort,
        "review_round": review_round, "overrides": overrides, "releases": releases,
    })


@access("checked")
@require_GET
def api_me(request):
    sites = visible_sites(request.user)
    return JsonResponse({
        "username": request.user.get_username(),
        "operator": is_operator(request.user),
        "roles": [
            {"site": m.site.slug, "study": m.study.slug, "role": m.role}
            for m in request.user.memberships.select_related("site", "study")
        ],
        "sees_whole_study": sorted(s.slug for s in visible_studies(request.user)
                                   if sees_whole_study(request.user, s)),
        "visible_sites": list(sites.values_list("slug", flat=True)),
        "visible_studies": list(visible_studies(request.user).values_list("slug", flat=True)),
    })
