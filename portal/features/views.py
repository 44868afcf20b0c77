"""Feature-set pages: a study's sets and the request form, one set's page, downloads, plots."""

import json

from django.contrib import messages
from django.core.exceptions import PermissionDenied
from django.http import Http404, HttpResponse
from django.shortcuts import redirect, render
from django.views.decorators.http import require_POST

from portal.accounts.permissions import Action, access, can, get_visible_study, require
from portal.datasets import blobs
from portal.features import plots
from portal.features.access import (
    may_download,
    may_run_on,
    may_see,
    set_sites,
    summary_visible_sets,
    visible_set,
    visible_set_summary,
)
from portal.features.downloads import feature_set_file
from portal.features.forms import FeatureSetForm
from portal.features.services import (
    FeatureRequestError,
    jobs_of,
    latest_versions,
    request_feature_set,
    status_of,
)
from portal.studies.models import current_protocol


def feature_choices():
    from cairn_science.features import registry

    return [(f.name, f"{f.name.replace('_', ' ')} ({f.family})") for f in registry().values()]


def request_form(user, study, data=None):
    sites = [v.site for v in latest_versions(study)
             if can(user, Action.RUN_JOBS, site=v.site, study=study)]
    protocol = current_protocol(study).data
    return FeatureSetForm(data, sites=sorted(sites, key=lambda s: s.slug),
                          bands=protocol["bands"], features=feature_choices()), sites


@access("checked")
def study_sets(request, study_slug):
    study = get_visible_study(request.user, study_slug)
    page = []
    for feature_set in study.feature_sets.select_related("created_by")[:200]:
        sites = set_sites(feature_set)
        if may_see(request.user, feature_set, sites):
            page.append({"set": feature_set, "sites": sites,
                         "status": status_of(feature_set)[0]})
    form, sites = request_form(request.user, study)
    return render(request, "features/study.html", {
        "study": study, "rows": page, "form": form if sites else None,
        "pooled": summary_visible_sets(request.user, study)})


@access("checked")
@require_POST
def new_set(request, study_slug):
    study = get_visible_study(request.user, study_slug)
    form, sites = request_form(request.user, study, request.POST)
    if not sites:
        raise PermissionDenied("you may not start work at any site of this study")
    if not form.is_valid():
        return render(request, "features/study.html", {"study": study, "rows": [],
                                                        "form": form}, status=400)
    chosen = [s for s in sites if s.slug in form.cleaned_data["sites"]]
    for site in chosen:
        require(request.user, Action.RUN_JOBS, site=site, study=study)
    versions = [v for v in latest_versions(study, chosen)]
    try:
        feature_set, created = request_feature_set(versions, overrides=form.overrides(),
                                                   user=request.user)
    except FeatureRequestError as exc:
        form.add_error(None, str(exc))
        return render(request, "features/study.html", {"study": study, "rows": [],
                                                        "form": form}, status=400)
    if not created:
        messages.info(request, "An identical feature set exists already: here it is.")
    return redirect("features:detail", set_id=feature_set.pk)


def _item_rows(feature_set):
    from portal.quality.models import QCRound

    rounds = {}
    for qc_round in QCRound.objects.filter(version__feature_sets=feature_set).order_by(
            "created_at", "id"):
        rounds[(qc_round.version_id, qc_round.settings_digest)] = qc_round.pk
    rows = []
    for item in feature_set.items.select_related(
            "recording__version__site", "recording__participant", "qc_run", "part"):
        part = item.part
        counts = part.window_counts if part else {}
        rows.append({
            "item": item, "recording": item.recording, "part": part,
            "round_id": rounds.get((item.recording.version_id, item.qc_run.settings_digest)),
            "kept": part.n_windows if part else None,
            "excluded": sum(v for k, v in counts.items() if k not in ("candidates", "kept")),
            "counts": counts,
            "interpolated": sorted(c for c, s in (part.channel_status if part else {}).items()
                                   if s == "interpolated"),
            "dropped": sorted(c for c, s in (part.channel_status if part else {}).items()
                              if s == "dropped"),
        })
    return rows


def _columns(feature_set):
    if not feature_set.sidecar_sha256:
        return {}
    with blobs.open_blob(feature_set.sidecar_sha256) as fh:
        return json.load(fh)["columns"]


def _default_column(columns):
    features = [name for name, c in columns.items() if c.get("kind") == "feature"]
    for prefix in ("alpha.relative_power.Pz", "alpha.relative_power.P", "alpha.relative_power."):
        found = [n for n in features if n.startswith(prefix)]
        if found:
            return found[0]
    return features[0] if features else None


def work_status(feature_set):
    """What the page's self-updating status part shows of the set's work."""
    from django.urls import reverse

    from portal.jobs.services import work_status as context

    state, error = status_of(feature_set)
    return context(
        state=state, error=error, total=feature_set.items.count(),
        done=feature_set.items.filter(part__isnull=False).count(), unit="recordings computed",
        jobs=list(jobs_of(feature_set).exclude(kind="features.recording").order_by("id")),
        status_url=reverse("features:status", kwargs={"set_id": feature_set.pk}))


@access("checked")
def set_status(request, set_id):
    feature_set, _ = visible_set(request.user, set_id)
    return render(request, "jobs/_work_status.html", work_status(feature_set))


@access("checked")
def set_detail(request, set_id):
    feature_set, sites = visible_set(request.user, set_id)
    status = work_status(feature_set)
    state = status["state"]
    rows = _item_rows(feature_set)
    columns = _columns(feature_set)
    chosen = request.GET.get("column") or _default_column(columns)
    if chosen not in columns or columns[chosen].get("kind") != "feature":
        chosen = _default_column(columns)
    return render(request, "features/detail.html", {
        **status,
        "set": feature_set, "sites": sites, "rows": rows,
        "kept_total": sum(r["kept"] or 0 for r in rows),
        "left_total": sum(r["excluded"] for r in rows),
        "excluded_total": sum(1 for r in rows if r["part"] and r["part"].excluded_reason),
        "params_text": json.dumps(feature_set.params, indent=2, sort_keys=True),
        "versions": feature_set.versions.select_related("site").order_by("site__slug"),
        "effects": feature_set.site_effects, "column": chosen,
        "feature_columns": [n for n, c in columns.items() if c.get("kind") == "feature"],
        "may_download": may_download(request.user, feature_set, sites) and state == "done",
        "may_reproduce": state == "done" and may_run_on(request.user, feature_set, sites),
    })


@access("checked")
def download(request, set_id, fmt):
    return feature_set_file(request, set_id, fmt)


@access("checked")
def plot(request, set_id, plot):
    kind = plot
    feature_set, _ = visible_set(request.user, set_id)
    if kind not in plots.KINDS or feature_set.state != "done":
        raise Http404("no such plot")
    columns = _columns(feature_set)
    column = request.GET.get("column") or _default_column(columns)
    if column not in columns or columns[column].get("kind") != "feature":
        raise Http404("no such column")
    svg = plots.render(feature_set, kind, column, columns[column])
    response = HttpResponse(svg, content_type="image/svg+xml")
    response["Cache-Control"] = "private, max-age=86400"
    return response


@access("checked")
def set_summary_view(request, set_id):
    """A pooled feature set seen from one of its sites: which sites, counts per site, pooled
    size and dates (portal.features.pooled); no rows, files or downloads."""
    from portal.features.pooled import set_summary

    feature_set, sites, mine = visible_set_summary(request.user, set_id)
    return render(request, "features/summary.html", {
        "summary": set_summary(feature_set, sites, mine), "study": feature_set.study})
