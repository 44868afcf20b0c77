"""Quality pages: a version's table, a recording's checks, overrides, plots and exports."""


from django.contrib import messages
from django.http import Http404, HttpResponse, HttpResponseBadRequest
from django.shortcuts import redirect, render
from django.views.decorators.http import require_POST

from portal.accounts.permissions import Action, access, require
from portal.datasets.access import visible_version
from portal.quality import plots, viewer
from portal.quality.access import (
    may_decide_channels,
    recording_in_round,
    visible_qc_run,
    visible_round,
)
from portal.quality.derivatives import derivative_zip
from portal.quality.forms import OverrideForm, RerunForm
from portal.quality.models import Verdict
from portal.quality.services import (
    decided_verdict,
    effective_channels,
    latest_overrides,
    progress,
    run_for,
    runs_query,
    set_override,
    shown_verdict,
    start_round,
)

VERDICT_ORDER = {Verdict.FAIL: 0, Verdict.REVIEW: 1, Verdict.PASS: 2, None: 3}


@access("checked")
def version_quality(request, version_id):
    version = visible_version(request.user, version_id)
    rounds = list(version.qc_rounds.all())
    if not rounds:
        return render(request, "quality/version.html", {"version": version, "rounds": []})
    chosen = request.GET.get("round")
    qc_round = next((r for r in rounds if str(r.pk) == chosen), rounds[0])
    return redirect("quality:round", round_id=qc_round.pk)


def work_status(qc_round):
    """What the page's self-updating status part shows of the round's checks."""
    from django.urls import reverse

    from portal.jobs.models import Job, JobState
    from portal.jobs.services import jobs_about
    from portal.jobs.services import work_status as context

    done, total = progress(qc_round)
    planning = Job.objects.filter(kind="qc.version", target_type="quality.qcround",
                                  target_id=str(qc_round.pk)).order_by("-id")[:1]
    failed = jobs_about("qc.recording", "round", qc_round.pk).filter(
        state=JobState.FAILED).order_by("-id")[:1]
    jobs = [j for j in list(planning) + list(failed) if j.state != JobState.DONE]
    error = next((j.error for j in jobs if j.state == JobState.FAILED), "")
    state = "done" if done >= total else ("failed" if error else "running")
    return context(state=state, error=error, done=done, total=total, unit="recordings checked",
                   jobs=jobs, status_url=reverse("quality:round_status",
                                                 kwargs={"round_id": qc_round.pk}))


@access("checked")
def round_status(request, round_id):
    return render(request, "jobs/_work_status.html",
                  work_status(visible_round(request.user, round_id)))


@access("checked")
def round_detail(request, round_id):
    qc_round = visible_round(request.user, round_id)
    version = qc_round.version
    from django.db.models.fields.json import KeyTransform

    runs = {run.recording_sha256: run for run in runs_query(qc_round).select_related(
        "effective").defer("result", "settings").annotate(
        reasons=KeyTransform("verdict_reasons", "result"))}
    rows = []
    for recording in version.recordings.select_related("participant"):
        run = runs.get(recording.sha256)
        shown = shown_verdict(run) if run else None
        rows.append({"recording": recording, "run": run, "shown": shown,
                     "verdict": shown["verdict"] if shown else None})
    sort = request.GET.get("sort", "verdict")
    if sort == "verdict":
        rows.sort(key=lambda r: (VERDICT_ORDER[r["verdict"]], r["recording"].path))
    elif sort == "bad":
        rows.sort(key=lambda r: -(r["shown"]["n_bad_channels"] if r["shown"] else -1))
    else:
        rows.sort(key=lambda r: r["recording"].path)
    may_run = may_decide_channels(request.user, qc_round)
    return render(request, "quality/round.html", {
        **work_status(qc_round),
        "round": qc_round, "version": version, "rows": rows, "sort": sort,
        "rounds": version.qc_rounds.all(), "may_run": may_run,
        "rerun_form": RerunForm(initial_settings=qc_round.settings) if may_run else None,
        "counts": {v: sum(1 for r in rows if r["verdict"] == v) for v in Verdict.values},
    })


@access("checked")
@require_POST
def rerun(request, version_id):
    version = visible_version(request.user, version_id)
    require(request.user, Action.RUN_JOBS, site=version.site, study=version.study)
    latest = version.qc_rounds.first()
    base = latest.settings if latest else {}
    form = RerunForm(request.POST, initial_settings=base)
    if not form.is_valid():
        messages.error(request, "; ".join(f"{field}: {' '.join(errors)}"
                                          for field, errors in form.errors.items()))
        return redirect("quality:version", version_id=version.pk)
    qc_round, created = start_round(version, user=request.user,
                                    qc_settings={**base, **form.cleaned_data})
    messages.info(request, "Checks started with these settings." if created else
                  "These settings were already used: showing that round.")
    return redirect("quality:round", round_id=qc_round.pk)


@access("checked")
def recording_quality(request, round_id, recording_id):
    qc_round, recording = recording_in_round(request.user, round_id, recording_id)
    site = qc_round.version.site
    run = run_for(qc_round, recording)
    overrides = latest_overrides(site, recording.sha256)
    channels = effective_channels(run, overrides) if run else {}
    decided = decided_verdict(run, overrides) if run else None
    may_override = may_decide_channels(request.user, qc_round)
    form = OverrideForm(channels=recording.channel_names) if may_override else None
    return render(request, "quality/recording.html", {
        "round": qc_round, "recording": recording, "run": run, "channels": channels,
        "decided": decided, "form": form, "overrides": overrides,
        "history": list(recording_overrides(site, recording.sha256)),
        "may_reproduce": run is not None and may_override,
        "signal": signal_context(request.GET, recording, channels),
    })


def signal_context(query, recording, channels):
    """The signal viewer's part of the page: its parameters (the defaults, with the message,
    when the query's are out of range), links to the neighbouring pages, and the bad
    channels it marks."""
    error = ""
    try:
        params = viewer.parse_params(query, recording.duration_s)
    except viewer.ViewError as exc:
        error = str(exc)
        params = viewer.parse_params({}, recording.duration_s)
    return {"params": params, "error": error, "links": viewer.page_links(params,
                                                                          recording.duration_s),
            "query": params.query(), "spans": viewer.SPANS_S, "gains": viewer.GAINS_UV,
            "filters": [(name, words) for name, (words, _, _) in viewer.FILTERS.items()],
            "stop_s": min(params.start_s + params.span_s, recording.duration_s or float("inf")),
            "bad": [name for name, c in channels.items() if c["status"] == "bad"]}


@access("checked")
def signal_image(request, round_id, recording_id):
    """One page of the recording's traces as a PNG (see :mod:`portal.quality.viewer`); the
    same access as the recording's quality page."""
    from cairn_science.bids.report import RefusedFile
    from portal.quality.reading import read_stored

    qc_round, recording = recording_in_round(request.user, round_id, recording_id)
    try:
        params = viewer.parse_params(request.GET, recording.duration_s)
    except viewer.ViewError as exc:
        return HttpResponseBadRequest(str(exc), content_type="text/plain; charset=utf-8")
    run = run_for(qc_round, recording)
    channels = effective_channels(
        run, latest_overrides(qc_round.version.site, recording.sha256)) if run else {}
    segments = run.result.get("segments", []) if run else []

    def take(raw):
        """Only the page's samples (and a filter's padding) are read from the file."""
        picks = [i for i, kind in enumerate(raw.get_channel_types()) if kind != "stim"]
        sfreq = raw.info["sfreq"]
        _, _, lo, hi = viewer.page_samples(params, sfreq, raw.n_times)
        return viewer.build_display(raw.get_data(picks=picks, start=lo, stop=hi),
                                    [raw.ch_names[i] for i in picks], sfreq, params,
                                    channels=channels, segments=segments, offset=lo,
                                    n_times=raw.n_times)

    def render_page():
        return viewer.draw(read_stored(recording, take))

    try:
        png = viewer.cached_png(viewer.cache_key(recording.sha256, params, channels, segments),
                                render_page)
    except RefusedFile as exc:
        return HttpResponse(f"{recording.path} could not be read: {exc}", status=422,
                            content_type="text/plain; charset=utf-8")
    response = HttpResponse(png, content_type="image/png")
    response["Cache-Control"] = "private, max-age=3600"
    return response


def recording_overrides(site, sha256):
    from portal.quality.models import ChannelOverride

    return ChannelOverride.objects.filter(site=site, recording_sha256=sha256).select_related(
        "created_by")[:50]


@access("checked")
@require_POST
def override(request, round_id, recording_id):
    qc_round, recording = recording_in_round(request.user, round_id, recording_id)
    site = qc_round.version.site
    require(request.user, Action.RUN_JOBS, site=site, study=qc_round.version.study)
    form = OverrideForm(request.POST, channels=recording.channel_names)
    if form.is_valid():
        try:
            set_override(site=site, recording=recording, user=request.user,
                         **form.cleaned_data)
            messages.success(request, f"{form.cleaned_data['channel']} is now "
                                      f"{form.cleaned_data['status']} for later steps.")
        except ValueError as exc:
            messages.error(request, str(exc))
    else:
        messages.error(request, "Choose a channel, good or bad, and say why.")
    return redirect("quality:recording", round_id=qc_round.pk, recording_id=recording.pk)


@access("checked")
def plot(request, run_id, kind):
    run = visible_qc_run(request.user, run_id)
    if kind not in plots.KINDS:
        raise Http404("no such plot")
    svg = plots.render(run, kind)
    response = HttpResponse(svg, content_type="image/svg+xml")
    response["Cache-Control"] = "private, max-age=86400"
    return response


@access("checked")
def download_derivative(request, round_id):
    return derivative_zip(request, round_id)

