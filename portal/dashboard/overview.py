"""The numbers behind the study overview and the site page, in a fixed number of queries
whatever the study's size: every count is an aggregate in the database, grouped by site.

"Current" means the newest dataset version of each site (a version holds the site's whole
dataset) and, for quality, the newest round of checks of that version.
"""

import datetime
import hashlib

from django.db.models import Count, F, OuterRef, Q, Subquery, Sum
from django.db.models.functions import Coalesce, TruncWeek

from portal.datasets.models import Block, DatasetVersion, Upload, UploadState
from portal.quality.models import QCChannel, QCRound, QCRun

VERDICTS = ("pass", "review", "fail")
UPLOAD_STATES = {"accepted": ("accepted",), "rejected": ("rejected",),
                 "waiting": (UploadState.QUEUED, UploadState.VALIDATING, "receiving")}
WEEKS_SHOWN = 26


def latest_versions(study, site_ids):
    """{site id: newest DatasetVersion of the study there}, with its recording count."""
    newest = DatasetVersion.objects.filter(study=study, site=OuterRef("site")).order_by(
        "-number").values("pk")[:1]
    rows = (DatasetVersion.objects.filter(study=study, site_id__in=site_ids)
            .annotate(newest=Subquery(newest)).filter(pk=F("newest"))
            .annotate(n_recordings=Count("recordings")).select_related("site"))
    return {v.site_id: v for v in rows}


def latest_rounds(versions):
    """{version id: its newest QCRound}."""
    out = {}
    for qc_round in QCRound.objects.filter(version__in=list(versions)).order_by(
            "version_id", "-created_at", "-id"):
        out.setdefault(qc_round.version_id, qc_round)
    return out


def with_decisions(runs):
    """``runs`` annotated with the verdict and bad-channel count after people's channel
    decisions (``shown_verdict``, ``shown_bad``): those of its EffectiveVerdict row, else
    the checks' own."""
    return runs.annotate(shown_verdict=Coalesce("effective__verdict", "verdict"),
                         shown_bad=Coalesce("effective__n_bad_channels", "n_bad_channels"))


def current_runs(versions, rounds):
    """The QCRun rows of each site's current recordings under its newest round, as one
    queryset (an OR of one condition per site), or None when nothing was checked; verdicts
    and counts after people's decisions are annotated (:func:`with_decisions`)."""
    from portal.datasets.models import Recording

    condition = Q()
    for version in versions:
        qc_round = rounds.get(version.pk)
        if qc_round is None:
            continue
        condition |= Q(site_id=version.site_id, settings_digest=qc_round.settings_digest,
                       code_version=qc_round.code_version,
                       recording_sha256__in=Recording.objects.filter(version=version)
                       .values("sha256"))
    if not condition:
        return None
    return with_decisions(QCRun.objects.filter(condition))


def _weeks(rows, key):
    """{series: {week date: count}} from rows of (week, series, n)."""
    out = {}
    for row in rows:
        week = row["week"]
        if week is None:
            continue
        if isinstance(week, datetime.datetime):
            week = week.date()
        out.setdefault(row[key], {})
        out[row[key]][week] = out[row[key]].get(week, 0) + row["n"]
    return out


def since_weeks(now):
    return now - datetime.timedelta(weeks=WEEKS_SHOWN)


def level_order(study):
    """The study's workload levels from the lowest rating up (its protocol's scale)."""
    from portal.studies.models import current_protocol

    scale = current_protocol(study).data.get("rating_scale", {})
    return [lv["name"] for lv in sorted(scale.get("levels", []), key=lambda lv: lv["min"])]


NUMBERS_CACHE_S = 3600


def data_signature(study, site_ids):
    """What the overview's numbers depend on, in three cheap aggregate queries: any new or
    finished upload, new dataset version, new quality round or result, or a person's
    channel decision (which rewrites a result's verdict after decisions) changes it."""
    from django.db.models import Max

    uploads = Upload.objects.filter(study=study, site_id__in=site_ids).aggregate(
        n=Count("id"), last=Max("id"), finished=Max("finished_at"))
    versions = QCRound.objects.filter(version__study=study, version__site_id__in=site_ids
                                      ).aggregate(version=Max("version_id"), round=Max("id"))
    runs = QCRun.objects.filter(site_id__in=site_ids).aggregate(
        last=Max("id"), n=Count("id"), decided=Max("effective__updated_at"))
    return (uploads["n"], uploads["last"], str(uploads["finished"]), versions["version"],
            versions["round"], runs["last"], runs["n"], str(runs["decided"]))


def cached_study_numbers(study, site_ids, *, now):
    """:func:`study_numbers`, kept per (study, readable sites, data signature, week, time
    zone: weeks start at the reader's midnight): unchanged data is not counted twice."""
    from django.core.cache import cache
    from django.utils import timezone

    key = ("cairn-overview", study.pk, tuple(sorted(site_ids)), data_signature(study, site_ids),
           now.date().isocalendar()[:2], timezone.get_current_timezone_name())
    digest = "cairn-overview-" + hashlib.sha256(repr(key).encode()).hexdigest()
    numbers = cache.get(digest)
    if numbers is None:
        numbers = study_numbers(study, site_ids, now=now)
        cache.set(digest, numbers, NUMBERS_CACHE_S)
    return numbers


def study_numbers(study, site_ids, *, now):
    """Per site and for the study: what the overview shows. ``site_ids``: the sites the
    reader may see (already limited to the study's)."""
    order = {name: i for i, name in enumerate(level_order(study))}
    versions = latest_versions(study, site_ids)
    rounds = latest_rounds(v.pk for v in versions.values())
    runs = current_runs(versions.values(), rounds)
    per_site = {sid: {"version": versions.get(sid), "verdicts": dict.fromkeys(VERDICTS, 0),
                      "checked": 0, "bad_channels": 0, "channels": 0, "rejected_sum": 0.0,
                      "levels": {}, "channels_flagged": {}}
                for sid in site_ids}
    verdict_weeks = {}
    if runs is not None:
        for row in runs.values("site_id", "shown_verdict").annotate(
                n=Count("id"), bad=Sum("shown_bad"), chans=Sum("n_channels"),
                rejected=Sum("rejected_share")):
            site = per_site[row["site_id"]]
            site["verdicts"][row["shown_verdict"]] += row["n"]
            site["checked"] += row["n"]
            site["bad_channels"] += row["bad"] or 0
            site["channels"] += row["chans"] or 0
            site["rejected_sum"] += row["rejected"] or 0.0
        for row in QCChannel.objects.filter(run__in=runs.values("pk")).values(
                "run__site_id", "channel").annotate(
                checked=Count("id"), flagged=Count("id", filter=Q(bad=True))):
            per_site[row["run__site_id"]]["channels_flagged"][row["channel"]] = (
                row["flagged"], row["checked"])
        verdict_weeks = _weeks(runs.filter(created_at__gte=since_weeks(now)).annotate(
            week=TruncWeek("created_at")).values("week", "shown_verdict").annotate(
            n=Count("id")), "shown_verdict")
    for row in Block.objects.filter(recording__version__in=list(versions.values())).values(
            "recording__version__site_id", "level").annotate(n=Count("id")):
        per_site[row["recording__version__site_id"]]["levels"][row["level"] or "no rating"] = \
            row["n"]
    upload_rows = Upload.objects.filter(study=study, site_id__in=site_ids,
                                        created_at__gte=since_weeks(now)).annotate(
        week=TruncWeek("created_at")).values("week", "state").annotate(n=Count("id"))
    by_state = _weeks(upload_rows, "state")
    upload_weeks = {}
    for name, states in UPLOAD_STATES.items():
        merged = {}
        for state in states:
            for week, n in by_state.get(state, {}).items():
                merged[week] = merged.get(week, 0) + n
        upload_weeks[name] = merged
    for site in per_site.values():
        checked = site["checked"]
        site["shares"] = {k: (100.0 * n / checked if checked else None)
                          for k, n in site["verdicts"].items()}
        site["bad_channel_share"] = (100.0 * site["bad_channels"] / site["channels"]
                                     if site["channels"] else None)
        site["rejected_share"] = 100.0 * site["rejected_sum"] / checked if checked else None
        total = sum(site["levels"].values())
        site["level_rows"] = [{"level": k, "n": n, "share": 100.0 * n / total}
                              for k, n in sorted(site["levels"].items(), key=lambda kv: (
                                  order.get(kv[0], len(order)), kv[0]))]
        site["round"] = rounds.get(site["version"].pk) if site["version"] else None
    return {"sites": per_site, "upload_weeks": upload_weeks,
            "verdict_weeks": {k: verdict_weeks.get(k, {}) for k in VERDICTS}}


def needing_review(site, version, qc_round):
    """The version's recordings whose current verdict (after people's channel decisions)
    is "review" or "fail", each with its verdict and bad-channel count (a queryset, for
    pagination)."""
    from portal.datasets.models import Recording

    runs = with_decisions(QCRun.objects.filter(
        site=site, recording_sha256=OuterRef("sha256"), settings_digest=qc_round.settings_digest,
        code_version=qc_round.code_version))
    return (Recording.objects.filter(version=version).select_related("participant")
            .annotate(verdict=Subquery(runs.values("shown_verdict")[:1]),
                      n_bad=Subquery(runs.values("shown_bad")[:1]),
                      rejected=Subquery(runs.values("rejected_share")[:1]))
            .filter(verdict__in=["review", "fail"]))
