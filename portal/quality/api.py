"""Quality rounds and results for scripts, and the BIDS derivative of a round."""

from django.db.models import Q
from django.http import JsonResponse
from django.urls import reverse
from django.views.decorators.http import require_GET

from portal.accounts.permissions import access, pairs_q
from portal.api_lists import answers_bad_query, filtered, page, when
from portal.api_spec import (
    DATETIME,
    INTEGER,
    NUMBER,
    STRING,
    array,
    nullable,
    obj,
    with_notice,
)
from portal.quality.access import (
    round_visible,
    versions_holding,
    visible_qc_run,
    visible_round,
)
from portal.quality.derivatives import derivative_zip
from portal.quality.models import QCRound, Verdict
from portal.quality.services import runs_query, shown_verdict

VERDICTS = tuple(Verdict.values)

ROUND_SCHEMA = obj({"id": INTEGER, "version": INTEGER, "study": STRING, "site": STRING,
                    "settings_digest": STRING, "code_version": STRING,
                    "created_at": DATETIME, "results": STRING, "derivative": STRING})
ROUND_DETAIL_SCHEMA = obj({**ROUND_SCHEMA["properties"], "settings": {"type": "object"},
                           "n_recordings": INTEGER, "n_checked": INTEGER,
                           "counts": obj({v: INTEGER for v in VERDICTS})})
RESULT_SCHEMA = obj({"id": INTEGER, "site": STRING, "recording_sha256": STRING,
                     "verdict": {"type": "string", "enum": list(VERDICTS)},
                     "decided": {"type": "boolean"}, "n_bad_channels": INTEGER,
                     "n_channels": INTEGER, "rejected_share": NUMBER,
                     "created_at": DATETIME})
RESULT_DETAIL_SCHEMA = obj({
    **RESULT_SCHEMA["properties"], "checks_verdict": {"type": "string", "enum": list(VERDICTS)},
    "reasons": array({}), "settings_digest": STRING, "code_version": STRING,
    "recordings": array(obj({"version": INTEGER, "path": STRING})),
    "channels": {"type": "object", "additionalProperties": obj(
        {"status": STRING, "reasons": array(STRING)})},
    "sfreq_hz": nullable(NUMBER), "duration_s": nullable(NUMBER)})


def round_json(qc_round):
    version = qc_round.version
    return {"id": qc_round.pk, "version": version.pk, "study": version.study.slug,
            "site": version.site.slug, "settings_digest": qc_round.settings_digest,
            "code_version": qc_round.code_version, "created_at": when(qc_round.created_at),
            "results": reverse("api:quality_results", args=[qc_round.pk]),
            "derivative": reverse("api:quality_derivative", args=[qc_round.pk])}


def result_json(run):
    shown = shown_verdict(run)
    return {"id": run.pk, "site": run.site.slug, "recording_sha256": run.recording_sha256,
            "verdict": shown["verdict"], "decided": shown["decided"],
            "n_bad_channels": shown["n_bad_channels"], "n_channels": run.n_channels,
            "rejected_share": run.rejected_share, "created_at": when(run.created_at)}


@access("checked")
@require_GET
@answers_bad_query
def rounds(request):
    """Quality rounds of the dataset versions the token sees (``?version=`` for one)."""
    rows = filtered(
        request, QCRound.objects.filter(pairs_q(request.user, site="version__site",
                                                study="version__study"))
        .select_related("version__site", "version__study"),
        {"study": "version__study__slug", "site": "version__site__slug",
         "version": "version_id", "created": "created_at"})
    return JsonResponse(page(request, "quality_rounds", rows, round_json,
                             visible=lambda r: round_visible(request.user, r)))


@access("checked")
@require_GET
def round_detail(request, round_id):
    qc_round = visible_round(request.user, round_id)
    runs = list(runs_query(qc_round).select_related("effective"))
    counts = dict.fromkeys(VERDICTS, 0)
    for run in runs:
        counts[shown_verdict(run)["verdict"]] += 1
    return JsonResponse({**round_json(qc_round), "settings": qc_round.settings,
                         "n_recordings": qc_round.version.recordings.count(),
                         "n_checked": len(runs), "counts": counts})


@access("checked")
@require_GET
@answers_bad_query
def round_results(request, round_id):
    """The round's results, one per checked recording file (``?state=`` a verdict after
    people's channel decisions)."""
    qc_round = visible_round(request.user, round_id)
    rows = filtered(request, runs_query(qc_round).select_related("site", "effective"),
                    {"state": (None, VERDICTS)})
    state = request.GET.get("state", "")
    if state:  # the shown verdict: a person's decision when there is one
        rows = rows.filter(Q(effective__verdict=state)
                           | Q(effective__isnull=True, verdict=state))
    return JsonResponse(page(request, f"quality_results_{qc_round.pk}", rows, result_json))


@access("checked")
@require_GET
def result_detail(request, run_id):
    run = visible_qc_run(request.user, run_id)
    shown = shown_verdict(run)
    recordings = versions_holding(run, request.user).order_by("version_id", "path")
    channels = {name: {"status": info.get("status", ""),
                       "reasons": [r.get("words", "") for r in info.get("reasons", [])]}
                for name, info in sorted(run.result.get("channels", {}).items())}
    return JsonResponse({**result_json(run), "checks_verdict": run.verdict,
                         "reasons": shown["reasons"],
                         "settings_digest": run.settings_digest,
                         "code_version": run.code_version,
                         "recordings": [{"version": r.version_id, "path": r.path}
                                        for r in recordings],
                         "channels": channels, "sfreq_hz": run.result.get("sfreq_hz"),
                         "duration_s": run.result.get("duration_s")})


@access("checked")
@require_GET
def derivative(request, round_id):
    """The round as a BIDS derivative zip: the web download itself (same rules and event)."""
    return with_notice(derivative_zip(request, round_id))

