"""Starting quality checks for a dataset version, and reading their effective results."""

from django.db import transaction
from django.utils import timezone

from cairn_science.canonical_json import canonical_sha256
from cairn_science.versions import QC_CODE_VERSION
from portal.audit.events import record
from portal.jobs.services import enqueue
from portal.quality.models import ChannelOverride, EffectiveVerdict, QCRound, QCRun, Verdict
from portal.studies.models import current_protocol
from portal.studies.protocol import qc_problems


class QCRequestError(ValueError):
    """Thresholds the checks cannot use; ``errors`` maps a setting to messages."""

    def __init__(self, errors):
        self.errors = errors
        super().__init__("; ".join(f"{k}: {m}" for k, ms in errors.items() for m in ms))


def check_settings(qc_settings):
    """Raise QCRequestError naming every threshold outside QCSettings' limits (the object
    the worker builds from the stored settings)."""
    if not isinstance(qc_settings, dict):
        raise QCRequestError({"settings": ["give the thresholds as an object"]})
    problems = qc_problems(qc_settings)
    if problems:
        raise QCRequestError(problems)


def settings_digest(qc_settings):
    return canonical_sha256(qc_settings, ascii=True, allow_nan=True)


def protocol_settings(study):
    return dict(current_protocol(study).data["qc"])


def start_round(version, *, user=None, qc_settings=None):
    """Ask for the checks of every recording of ``version`` (study settings by default).

    Returns (round, created). Asking again with the same settings returns the same round.
    The settings are checked once by QCSettings' limits (QCRequestError names each bad
    one, before anything is stored) and stored as given: the digest of unchanged values is
    the one rows and audit events already hold, and the worker rebuilds QCSettings from
    them (defaults for the rest).
    """
    qc_settings = dict(qc_settings if qc_settings is not None else protocol_settings(
        version.study))
    check_settings(qc_settings)
    digest = settings_digest(qc_settings)
    with transaction.atomic():
        qc_round, created = QCRound.objects.get_or_create(
            version=version, settings_digest=digest, code_version=QC_CODE_VERSION,
            defaults={"settings": qc_settings, "created_by": user},
        )
        if created:
            record("qc.started", actor=user, worker=user is None, target=qc_round,
                   site=version.site, study=version.study,
                   summary=f"quality checks of {version} asked for",
                   params={"settings": qc_settings, "settings_digest": digest,
                           "code_version": QC_CODE_VERSION},
                   inputs=[{"dataset_version": version.pk,
                            "manifest_sha256": version.manifest_sha256}])
            enqueue("qc.version", target=qc_round, site=version.site, study=version.study,
                    created_by=user)
    return qc_round, created


def runs_query(qc_round):
    """The round's results as a queryset (one per checked recording file)."""
    shas = qc_round.version.recordings.values("sha256")
    return QCRun.objects.filter(
        site_id=qc_round.version.site_id, recording_sha256__in=shas,
        settings_digest=qc_round.settings_digest, code_version=qc_round.code_version)


def runs_of(qc_round):
    """{recording sha256: QCRun} for the round's recordings that have been checked."""
    return {run.recording_sha256: run for run in runs_query(qc_round)}


def run_for(qc_round, recording):
    """The round's result for one recording, or None if not checked yet."""
    return QCRun.objects.filter(
        site_id=qc_round.version.site_id, recording_sha256=recording.sha256,
        settings_digest=qc_round.settings_digest, code_version=qc_round.code_version).first()


def progress(qc_round):
    total = qc_round.version.recordings.count()
    done = runs_query(qc_round).values("recording_sha256").distinct().count()
    return done, total


def latest_overrides(site, recording_sha256):
    """{channel: override} with the newest decision per channel."""
    newest = {}
    for item in ChannelOverride.objects.filter(site=site, recording_sha256=recording_sha256):
        newest.setdefault(item.channel, item)
    return newest


def effective_channels(run, overrides):
    """Per channel: status, whether a person set it, and the reasons in words."""
    out = {}
    for name, info in run.result["channels"].items():
        override = overrides.get(name)
        reasons = [r["words"] for r in info.get("reasons", [])]
        if override is not None:
            out[name] = {"status": override.status, "by": "person",
                         "reasons": [f"set {override.status} by {override.created_by}: "
                                     f"{override.reason}"], "automatic": info["status"],
                         "automatic_reasons": reasons}
        else:
            out[name] = {"status": info["status"],
                         "by": "site" if info.get("marked_by_site") else "checks",
                         "reasons": reasons, "automatic": info["status"],
                         "automatic_reasons": reasons}
    return out


def decided_verdict(run, overrides):
    """The verdict of ``run`` after people's decisions (``overrides``: {channel: override}),
    by the checks' own rule (:func:`cairn_science.qc.verdict.effective_verdict`): a dict with
    verdict, its label, verdict_reasons, n_bad_channels, n_channels and bad_channels. The
    stored result is not changed."""
    from cairn_science.qc.settings import QCSettings
    from cairn_science.qc.verdict import effective_verdict

    decided = effective_verdict(run.result,
                                {name: item.status for name, item in overrides.items()},
                                settings=QCSettings.from_stored(run.settings))
    return {**decided, "label": Verdict(decided["verdict"]).label}


def shown_verdict(run):
    """What pages show of a result: verdict, its label, bad-channel count and reasons after
    people's decisions when there are any ("decided" True), else as the checks found
    (reasons from the run's "reasons" annotation or its result)."""
    try:
        decided = run.effective
    except EffectiveVerdict.DoesNotExist:
        reasons = getattr(run, "reasons", None)
        if reasons is None and "result" in run.__dict__:
            reasons = run.result.get("verdict_reasons")
        verdict, n_bad, decided = run.verdict, run.n_bad_channels, None
    else:
        verdict, n_bad, reasons = decided.verdict, decided.n_bad_channels, decided.verdict_reasons
    return {"verdict": verdict, "label": Verdict(verdict).label, "n_bad_channels": n_bad,
            "n_channels": run.n_channels, "reasons": reasons or [], "decided": decided is not None}


def refresh_decided(site, recording_sha256, runs=None):
    """Write, for every result of this recording file at ``site`` (or ``runs``), its
    verdict after people's decisions; nothing when nobody decided. Returns one dict per
    result: qc_run, settings_digest, code_version, before and after (verdict and bad-channel
    count)."""
    overrides = latest_overrides(site, recording_sha256)
    if not overrides:
        return []
    if runs is None:
        runs = QCRun.objects.filter(site=site, recording_sha256=recording_sha256)
    changes = []
    for run in runs:
        row = EffectiveVerdict.objects.filter(run=run).first()
        before = ({"verdict": row.verdict, "n_bad_channels": row.n_bad_channels} if row else
                  {"verdict": run.verdict, "n_bad_channels": run.n_bad_channels})
        decided = decided_verdict(run, overrides)
        EffectiveVerdict.objects.update_or_create(run=run, defaults={
            "verdict": decided["verdict"], "verdict_reasons": decided["verdict_reasons"],
            "n_bad_channels": decided["n_bad_channels"], "updated_at": timezone.now()})
        changes.append({"qc_run": run.pk, "settings_digest": run.settings_digest,
                        "code_version": run.code_version, "before": before,
                        "after": {"verdict": decided["verdict"],
                                  "n_bad_channels": decided["n_bad_channels"]}})
    return changes


def set_override(*, site, recording, channel, status, reason, user):
    """Store a person's decision on one channel and, in the same transaction, the verdict
    after it of every quality result of the recording file; the audit event records each
    result's verdict and bad-channel count before and after."""
    if channel not in recording.channel_names:
        raise ValueError(f"{recording.path} has no channel {channel!r}")
    if not reason.strip():
        raise ValueError("say why (the reason is kept in the audit trail)")
    with transaction.atomic():
        runs = list(QCRun.objects.select_for_update().filter(
            site=site, recording_sha256=recording.sha256).order_by("pk"))
        item = ChannelOverride.objects.create(
            site=site, recording_sha256=recording.sha256, channel=channel, status=status,
            reason=reason.strip()[:300], created_by=user,
        )
        changes = refresh_decided(site, recording.sha256, runs=runs)
        record("qc.channel_override", actor=user, target=item, site=site,
               study=recording.version.study,
               summary=f"{channel} of {recording.path} set {status}: {reason.strip()[:120]}",
               params={"channel": channel, "status": status, "reason": reason.strip()},
               inputs=[{"recording": recording.pk, "sha256": recording.sha256}],
               outputs=changes)
    return item
