"""Starting quality checks for a dataset version, and reading their effective results."""

import hashlib
import json

from django.db import transaction

from portal.audit.events import record
from portal.jobs.services import enqueue
from portal.quality.models import ChannelOverride, QCRound, QCRun
from portal.studies.models import current_protocol

#: Bumped whenever the checks change what they compute; part of every result's identity.
QC_CODE_VERSION = "qc-2"


def settings_digest(qc_settings):
    canonical = json.dumps(qc_settings, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(canonical.encode()).hexdigest()


def protocol_settings(study):
    return dict(current_protocol(study).data["qc"])


def start_round(version, *, user=None, qc_settings=None):
    """Ask for the checks of every recording of ``version`` (study settings by default).

    Returns (round, created). Asking again with the same settings returns the same round.
    """
    qc_settings = dict(qc_settings if qc_settings is not None else protocol_settings(
        version.study))
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


def set_override(*, site, recording, channel, status, reason, user):
    if channel not in recording.channel_names:
        raise ValueError(f"{recording.path} has no channel {channel!r}")
    if not reason.strip():
        raise ValueError("say why (the reason is kept in the audit trail)")
    with transaction.atomic():
        item = ChannelOverride.objects.create(
            site=site, recording_sha256=recording.sha256, channel=channel, status=status,
            reason=reason.strip()[:300], created_by=user,
        )
        record("qc.channel_override", actor=user, target=item, site=site,
               study=recording.version.study,
               summary=f"{channel} of {recording.path} set {status}: {reason.strip()[:120]}",
               params={"channel": channel, "status": status, "reason": reason.strip()},
               inputs=[{"recording": recording.pk, "sha256": recording.sha256}])
    return item
