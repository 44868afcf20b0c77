"""Training pages: a study's runs and the form, one run, comparison across runs, plots,
release approval, each site's release downloads."""

import json

from django import forms as django_forms
from django.contrib import messages
from django.core.exceptions import PermissionDenied
from django.http import Http404, HttpResponse
from django.shortcuts import get_object_or_404, redirect, render
from django.urls import reverse
from django.views.decorators.http import require_http_methods, require_POST

from portal.accounts.permissions import (
    access,
    get_visible_site,
    get_visible_study,
    is_lead,
)
from portal.datasets import blobs
from portal.features.access import may_run_on, may_see
from portal.features.models import FeatureSet
from portal.training import plots
from portal.training.access import (
    site_may_use,
    visible_run,
)
from portal.training.downloads import release_file_response
from portal.training.forms import TrainingForm
from portal.training.models import ModelRelease, ReleaseState
from portal.training.services import (
    TrainingRequestError,
    WithdrawalError,
    approve,
    progress_of,
    rerun,
    start_run,
    status_of,
    withdraw,
)


def _form(user, study, data=None):
    sets = [fs for fs in FeatureSet.objects.filter(study=study, state="done")
            if may_run_on(user, fs)]
    return TrainingForm(data, feature_sets=sets), sets


@access("checked")
def study_runs(request, study_slug):
    study = get_visible_study(request.user, study_slug)
    rows = []
    for run in study.training_runs.select_related("feature_set", "created_by")[:200]:
        if may_see(request.user, run.feature_set):
            rows.append({"run": run, "status": status_of(run)[0]})
    form, sets = _form(request.user, study)
    from portal.training.access import summary_visible_runs

    return render(request, "training/study.html", {"study": study, "rows": rows,
                                                   "form": form if sets else None,
                                                   "pooled": summary_visible_runs(
                                                       request.user, study)})


@access("checked")
@require_POST
def new_run(request, study_slug):
    study = get_visible_study(request.user, study_slug)
    form, sets = _form(request.user, study, request.POST)
    if not sets:
        raise PermissionDenied("no feature set here on which you may train")
    if form.is_valid():
        try:
            spec = form.spec()
            chosen = next((fs for fs in sets if fs.pk == spec.get("feature_set")), None)
            if chosen is None:
                raise TrainingRequestError({"feature_set": [
                    "choose one of the feature sets offered to you"]})
            run = start_run(spec, user=request.user)
            return redirect("training:detail", training_id=run.pk)
        except django_forms.ValidationError as exc:
            form.add_error(None, exc)
        except TrainingRequestError as exc:
            form.add_spec_errors(exc.errors)  # on the fields they concern
    rows = []
    return render(request, "training/study.html", {"study": study, "rows": rows, "form": form},
                  status=400)


def _model_rows(run):
    results = run.results.get("models", {})
    rows = []
    for name, r in results.items():
        rows.append({"name": name, "ba": r["per_fold"]["balanced_accuracy"],
                     "acc": r["per_fold"]["accuracy"], "f1": r["per_fold"]["macro_f1"],
                     "kappa": r["per_fold"]["kappa"], "pooled": r["pooled"], "ci": r["ci"],
                     "chance": r["chance"], "mark": _selection_mark(run, name)})
    rows.sort(key=lambda r: -r["ba"]["mean"])
    return rows


def _selection_mark(run, name):
    """How a model stands in the choice of the release model: "named" (in the spec),
    "chosen" (its lead over every other is supported by the corrected paired test),
    "highest" (best mean, but some others are not measurably different), "tie" (not
    measurably different from the released one), "released" (a run stored before choices
    were tested, or one model only), or ""."""
    selection = (run.results.get("statistics") or {}).get("selection") or {}
    released = run.results.get("release_model")
    ties = selection.get("no_measurable_difference") or []
    if name == released:
        if selection.get("how") == "named":
            return "named"
        if selection.get("how") == "best":
            return "highest" if ties else "chosen"
        return "released"
    return "tie" if name in ties else ""


def _permutation(statistics):
    """The stored permutation test with the smallest p its count allows (runs stored before
    it was kept get it computed here)."""
    test = (statistics or {}).get("permutation")
    if not test:
        return None
    return {"min_p_value": 1.0 / (1 + test["n_permutations"]), **test}


def work_status(run):
    """What the page's self-updating status part shows of the run's work."""
    from portal.jobs.services import work_status as context

    state, error = status_of(run)
    done, total = progress_of(run)
    return context(state=state, error=error, done=done, total=total, unit="model folds done",
                   jobs=list(run_jobs(run)),
                   status_url=reverse("training:status", kwargs={"training_id": run.pk}))


@access("checked")
def run_status(request, training_id):
    run, _ = visible_run(request.user, training_id)
    return render(request, "jobs/_work_status.html", work_status(run))


@access("checked")
def run_detail(request, training_id):
    run, sites = visible_run(request.user, training_id)
    status = work_status(run)
    rows = _model_rows(run)
    best = run.results.get("release_model")
    best_result = run.results.get("models", {}).get(best) if best else None
    lead = is_lead(request.user, run.study)
    releases = list(run.releases.select_related("trained_on_site", "approved_by",
                                                 "withdrawn_by"))
    return render(request, "training/detail.html", {
        **status,
        "run": run, "sites": sites, "rows": rows, "best": best, "best_result": best_result,
        "labels": run.results.get("labels", []),
        "confusion": list(zip(run.results.get("labels", []),
                              best_result["pooled"]["confusion"], strict=False))
        if best_result else [],
        "statistics": run.results.get("statistics", {}),
        "selection": (run.results.get("statistics") or {}).get("selection"),
        "permutation": _permutation(run.results.get("statistics")),
        "spec_text": json.dumps(run.spec, indent=2, sort_keys=True),
        "releases": releases, "lead": lead,
        "may_rerun": may_run_on(request.user, run.feature_set, sites),
        "rerun_check": _rerun_check(run, status["state"]),
    })


def _rerun_check(run, state):
    """For a re-run that is done: its fingerprint against the original's."""
    from portal.training.fingerprint import training_fingerprint

    original = run.rerun_of
    if original is None or state != "done" or original.state != "done":
        return None
    mine, theirs = training_fingerprint(run), training_fingerprint(original)
    return {"matches": mine == theirs, "sha256": mine, "original_sha256": theirs,
            "original": original.pk}


def run_jobs(run):
    from portal.training.services import jobs_of

    return jobs_of(run).exclude(kind="training.fold").order_by("id")


@access("checked")
@require_POST
def rerun_view(request, training_id):
    run, sites = visible_run(request.user, training_id)
    if not may_run_on(request.user, run.feature_set, sites):
        raise PermissionDenied("you may not start work on this feature set")
    try:
        again = rerun(run, user=request.user)
    except TrainingRequestError as exc:
        messages.error(request, f"Run {run.pk} cannot be repeated as stored: {exc}")
        return redirect("training:detail", training_id=run.pk)
    messages.info(request, f"Run {run.pk} is being reproduced from its stored spec.")
    return redirect("training:detail", training_id=again.pk)


@access("checked")
def compare(request, study_slug):
    study = get_visible_study(request.user, study_slug)
    runs = [r for r in study.training_runs.filter(state="done").select_related("feature_set")
            [:50] if may_see(request.user, r.feature_set)]
    chosen = request.GET.getlist("run")
    if chosen:
        runs = [r for r in runs if str(r.pk) in chosen]
    table = []
    for run in runs:
        for row in _model_rows(run):
            table.append({"run": run, **row})
    table.sort(key=lambda r: -r["ba"]["mean"])
    return render(request, "training/compare.html", {"study": study, "table": table,
                                                     "runs": runs})


@access("checked")
def plot(request, training_id):
    run, _ = visible_run(request.user, training_id)
    if run.state != "done":
        raise Http404("no plot yet")
    response = HttpResponse(plots.render(run), content_type="image/svg+xml")
    response["Cache-Control"] = "private, max-age=86400"
    return response


def _lead_release(request, release_id):
    """The release, if the user sees its run and leads its study (404, else 403)."""
    release = get_object_or_404(ModelRelease.objects.select_related(
        "run__study", "run__feature_set", "trained_on_site", "approved_by", "withdrawn_by"),
        pk=release_id)
    if not may_see(request.user, release.run.feature_set):
        raise Http404("no such release")
    if not is_lead(request.user, release.run.study):
        raise PermissionDenied("only the study lead approves or withdraws releases")
    return release


def _card_text(release):
    with blobs.open_blob(release.card_sha256) as fh:
        return fh.read().decode("utf-8", errors="replace")


@access("checked")
@require_http_methods(["GET", "POST"])
def approve_view(request, release_id):
    """The model card, then the study lead's explicit yes: a POST without ``confirm=yes``
    approves nothing and shows the card again."""
    release = _lead_release(request, release_id)
    error = ""
    if request.method == "POST" and release.state == ReleaseState.PENDING:
        if request.POST.get("confirm") == "yes":
            if approve(release, user=request.user):
                messages.info(request, f"Release {release.pk} is now downloadable by the "
                                       "sites.")
            return redirect("training:detail", training_id=release.run_id)
        error = ("Tick the box to confirm that you read the model card and approve this "
                 "release for the sites.")
    return render(request, "training/approve.html", {
        "release": release, "run": release.run, "card": _card_text(release), "error": error},
        status=400 if error else 200)


@access("checked")
@require_http_methods(["GET", "POST"])
def withdraw_view(request, release_id):
    """Withdraw an approved release, with the reason the sites will read."""
    release = _lead_release(request, release_id)
    error, reason = "", ""
    if request.method == "POST" and release.state == ReleaseState.APPROVED:
        reason = request.POST.get("reason", "")
        try:
            withdraw(release, user=request.user, reason=reason)
        except WithdrawalError as exc:
            error = str(exc)
        else:
            messages.info(request, f"Release {release.pk} is withdrawn: its files are no "
                                   "longer given out.")
            return redirect("training:detail", training_id=release.run_id)
    return render(request, "training/withdraw.html", {
        "release": release, "run": release.run, "error": error, "reason": reason},
        status=400 if error else 200)


@access("checked")
def site_releases(request, site_slug):
    site = get_visible_site(request.user, site_slug)
    rows = []
    for release in ModelRelease.objects.filter(run__feature_set__versions__site=site).distinct(
            ).select_related("run__study", "run__feature_set", "trained_on_site",
                             "withdrawn_by"):
        if not site_may_use(request.user, release, site):
            continue
        rows.append({"release": release,
                     "site_scores": release.scores.get("per_site", {}).get(site.slug)})
    return render(request, "training/releases.html", {"site": site, "rows": rows})


@access("checked")
def release_file(request, release_id, part, site_slug):
    return release_file_response(request, release_id, part, site_slug)


@access("checked")
def spec_diff(request, training_id):
    """The differences between this run's spec and another's (``?with=ID``)."""
    from portal.audit.diff import json_diff

    run, _ = visible_run(request.user, training_id)
    other_id = request.GET.get("with", "")
    if not other_id.isdigit():
        messages.error(request, "Choose the run to compare with (its number).")
        return redirect("training:detail", training_id=run.pk)
    other, _ = visible_run(request.user, int(other_id))
    rows = [{**row, "left": json.dumps(row["left"], sort_keys=True),
             "right": json.dumps(row["right"], sort_keys=True)}
            for row in json_diff(run.spec, other.spec)]
    return render(request, "training/spec_diff.html", {
        "run": run, "other": other, "rows": rows,
        "same_data": run.feature_set_id == other.feature_set_id})


@access("checked")
def run_summary_view(request, training_id):
    """A pooled run seen from one of its sites: which sites, counts per site, pooled scores
    and dates (portal.features.pooled); nothing per recording, fold or file."""
    from portal.features.pooled import run_summary
    from portal.training.access import visible_run_summary

    run, sites, mine = visible_run_summary(request.user, training_id)
    return render(request, "training/summary.html", {"summary": run_summary(run, sites, mine),
                                                     "study": run.study})
