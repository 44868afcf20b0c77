"""Training runs for scripts: POST a spec, GET a run's state and scores."""

import json

from django.http import Http404, JsonResponse
from django.urls import reverse
from django.views.decorators.http import require_GET, require_http_methods

from portal.accounts.permissions import access, get_visible_site, runs_anywhere, visible_studies
from portal.api_errors import api_error
from portal.api_lists import answers_bad_query, filtered, page, when
from portal.api_spec import (
    DATETIME,
    INTEGER,
    NUMBER,
    RESEARCH_USE,
    STRING,
    array,
    nullable,
    obj,
    with_notice,
)
from portal.features.access import may_run_on, may_see
from portal.features.models import FeatureSet
from portal.training.access import release_sites, visible_run
from portal.training.downloads import release_file_response
from portal.training.models import ModelRelease, ReleaseState, RunState, TrainingRun
from portal.training.services import TrainingRequestError, run_report, start_run


@access("checked")
@require_http_methods(["POST"])
def create_run(request):
    """POST a spec (format in the README) → 201 with the run's id and state."""
    if not runs_anywhere(request.user):
        return JsonResponse({"errors": {"user": ["your roles do not include starting work"]}},
                            status=403)
    try:
        spec = json.loads(request.body or b"{}")
    except (ValueError, UnicodeDecodeError):
        return JsonResponse({"errors": {"body": ["send the spec as a JSON object"]}},
                            status=400)
    feature_set = (FeatureSet.objects.filter(pk=spec.get("feature_set")).first()
                   if isinstance(spec, dict) and isinstance(spec.get("feature_set"), int)
                   else None)
    if feature_set is not None and not may_see(request.user, feature_set):
        feature_set = None
    if feature_set is None:
        return JsonResponse({"errors": {"feature_set": ["no such feature set"]}}, status=400)
    if not may_run_on(request.user, feature_set):
        return JsonResponse({"errors": {"feature_set": [
            "you may not start work on every site of this feature set"]}}, status=403)
    try:
        run = start_run(spec, user=request.user)
    except TrainingRequestError as exc:
        return JsonResponse({"errors": exc.errors}, status=400)
    return JsonResponse(run_report(run), status=201)


@access("checked")
@require_GET
def run_status(request, training_id):
    run, _ = visible_run(request.user, training_id)
    return JsonResponse(run_report(run))



# --- reading: runs and releases for scripts ----------------------------------------------------

RUN_STATES = tuple(RunState.values)
RELEASE_STATES = tuple(ReleaseState.values)
PARTS = ("bundle", "model", "card", "spec")
WITHDRAWN = "withdrawn"  # ReleaseState's, where the withdrawal is part of the model
POOLED = ("accuracy", "balanced_accuracy", "macro_f1", "kappa")

SCORES_SCHEMA = {"type": "object", "additionalProperties": obj(
    {k: nullable(NUMBER) for k in POOLED})}
RUN_SCHEMA = obj({"id": INTEGER, "study": STRING, "feature_set": INTEGER,
                  "state": {"type": "string", "enum": list(RUN_STATES)},
                  "spec_digest": STRING, "code_version": STRING, "created_at": DATETIME,
                  "finished_at": nullable(DATETIME), "scores": SCORES_SCHEMA})
RUN_DETAIL_SCHEMA = obj({**RUN_SCHEMA["properties"], "spec": {"type": "object"},
                         "report": obj({"run": INTEGER, "state": STRING,
                                        "error": nullable(STRING), "warning": nullable(STRING),
                                        "models": {"type": "object"}, "statistics": {}}),
                         "releases": array(INTEGER)})
RELEASE_SCHEMA = obj({"id": INTEGER, "run": INTEGER, "study": STRING, "model": STRING,
                      "kind": STRING, "trained_on_site": nullable(STRING),
                      "state": {"type": "string", "enum": list(RELEASE_STATES)},
                      "sites": array(STRING), "model_sha256": STRING,
                      "bundle_sha256": STRING, "created_at": DATETIME,
                      "approved_at": nullable(DATETIME),
                      "withdrawn_at": nullable(DATETIME), "withdrawal_reason": nullable(STRING),
                      "downloads": obj({part: STRING for part in PARTS})})
RELEASE_DETAIL_SCHEMA = obj({**RELEASE_SCHEMA["properties"], "card_sha256": STRING,
                             "spec_sha256": STRING, "model_digest": STRING,
                             "scores": {"type": "object"}, "research_use": STRING})


def _scores(run):
    out = {}
    for name, result in ((run.results or {}).get("models") or {}).items():
        pooled = result.get("pooled") or {} if isinstance(result, dict) else {}
        out[name] = {k: pooled.get(k) for k in POOLED}
    return out


def run_json(run):
    return {"id": run.pk, "study": run.study.slug, "feature_set": run.feature_set_id,
            "state": run.state, "spec_digest": run.spec_digest,
            "code_version": run.code_version, "created_at": when(run.created_at),
            "finished_at": when(run.finished_at), "scores": _scores(run)}


@access("checked")
@require_GET
@answers_bad_query
def runs(request):
    """Training runs on feature sets whose every site the token sees, with pooled scores."""
    rows = filtered(request, TrainingRun.objects.filter(study__in=visible_studies(request.user))
                    .select_related("study", "feature_set"),
                    {"study": "study__slug", "state": ("state", RUN_STATES),
                     "feature_set": "feature_set_id", "created": "created_at"})
    return JsonResponse(page(request, "training_runs", rows, run_json,
                             visible=lambda run: may_see(request.user, run.feature_set)))


@access("checked")
@require_GET
def run_detail(request, training_id):
    run, _ = visible_run(request.user, training_id)
    releases = [r.pk for r in run.releases.select_related("run__feature_set", "run__study")
                .order_by("pk") if release_sites(request.user, r)]
    return JsonResponse({**run_json(run), "spec": run.spec, "report": run_report(run),
                         "releases": releases})


def release_json(release, sites):
    return {"id": release.pk, "run": release.run_id, "study": release.run.study.slug,
            "model": release.model, "kind": release.kind,
            "trained_on_site": release.trained_on_site.slug if release.trained_on_site
            else None, "state": release.state, "sites": [s.slug for s in sites],
            "model_sha256": release.model_sha256, "bundle_sha256": release.bundle_sha256,
            "created_at": when(release.created_at), "approved_at": when(release.approved_at),
            # a withdrawn release stays listed (as on the sites' pages); its files are refused
            "withdrawn_at": when(getattr(release, "withdrawn_at", None)),
            "withdrawal_reason": getattr(release, "withdrawal_reason", "") or None,
            "downloads": {part: reverse("api:release_download", args=[release.pk, part])
                          for part in PARTS}}


@access("checked")
@require_GET
@answers_bad_query
def releases(request):
    """Model releases the token may use for at least one site (an unapproved one only for its
    study's lead, as on the sites' release pages)."""
    user = request.user
    rows = filtered(request, ModelRelease.objects.filter(
        run__study__in=visible_studies(user)).select_related(
        "run__study", "run__feature_set", "trained_on_site"),
        {"study": "run__study__slug", "site": None, "state": ("state", RELEASE_STATES),
         "created": "created_at"})
    site = request.GET.get("site", "")
    cache = {}

    def usable(release):
        cache[release.pk] = [s for s in release_sites(user, release)
                             if not site or s.slug == site]
        return bool(cache[release.pk])

    return JsonResponse(page(request, "releases", rows,
                             lambda r: release_json(r, cache[r.pk]), visible=usable))


def _visible_release(user, release_id):
    release = ModelRelease.objects.filter(pk=release_id).select_related(
        "run__study", "run__feature_set", "trained_on_site").first()
    sites = release_sites(user, release) if release is not None else []
    if not sites:
        raise Http404("no such release")
    return release, sites


@access("checked")
@require_GET
def release_detail(request, release_id):
    release, sites = _visible_release(request.user, release_id)
    return JsonResponse({**release_json(release, sites), "card_sha256": release.card_sha256,
                         "spec_sha256": release.spec_sha256,
                         "model_digest": release.model_digest, "scores": release.scores,
                         "research_use": RESEARCH_USE})


@access("checked")
@require_GET
def release_download(request, release_id, part):
    """One file of a release, for ``?site=`` (default: the first site the token may use it
    for): the web download itself (same rules for unapproved releases, same audit event)."""
    slug = request.GET.get("site", "")
    release, sites = _visible_release(request.user, release_id)
    site = get_visible_site(request.user, slug) if slug else sites[0]
    if release.state == WITHDRAWN and site in sites:
        return api_error(
            f"release {release.pk} was withdrawn by the study lead on "
            f"{when(getattr(release, 'withdrawn_at', None))}: "
            f"{getattr(release, 'withdrawal_reason', '') or 'no reason given'}; its files are "
            "no longer given out. Ask the study lead which release replaces it",
            status=410, code="withdrawn")
    return with_notice(release_file_response(request, release_id, part, site.slug))
