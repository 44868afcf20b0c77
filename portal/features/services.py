"""Asking for a feature set: resolving parameters, pinning each recording's inputs, reuse.

The preparation parameters are built here as the science's ``PrepSettings`` (which loads no
signal library until a recording is prepared) and checked once by its declared limits; the
set stores their plain form (``as_dict``) and the worker rebuilds the same object from it.
"""

from django.db import transaction

from cairn_science.canonical_json import canonical_sha256
from cairn_science.params import ParamError
from cairn_science.signal.prepare import PrepSettings, site_key
from cairn_science.versions import FEATURES_CODE_VERSION
from portal.audit.events import record
from portal.datasets.models import DatasetVersion
from portal.features.models import FeatureSet, FeatureSetItem
from portal.jobs.services import enqueue, jobs_about, state_with_failures
from portal.quality.models import QCRound
from portal.quality.services import effective_channels, latest_overrides, runs_of
from portal.studies.models import current_protocol
from portal.studies.protocol import DEFAULT_PROTOCOL

#: What a request may override of the preparation: PrepSettings' fields but the channels
#: (given by the top-level channel rule).
PREPROCESSING_FIELDS = tuple(name for name in PrepSettings._parameter_constraints
                             if name != "channels")
FEATURE_FIELDS = ("features", "params", "band_signals", "welch_segment_s", "bands")
TOP_LEVEL = ("channels", "preprocessing", "features")


class FeatureRequestError(ValueError):
    """A request that cannot be computed; the message says what to change. ``field`` names
    the request field at fault (e.g. ``preprocessing.overlap``) when there is one."""

    def __init__(self, message, *, field=None):
        self.field = field
        super().__init__(f"{field}: {message}" if field else message)


def canonical_digest(data):
    return canonical_sha256(data, allow_nan=True)


def channel_key(name):
    """Case-insensitive key of an electrode name, classic and modern 10-20 names alike (the
    science's matching: ``cairn_science.signal.prepare.site_key``)."""
    return site_key(name)


def common_channels(channel_lists):
    """Channels present in every list (aliases matched), in the first list's order."""
    channel_lists = [list(names) for names in channel_lists]
    if not channel_lists:
        return []
    shared = set.intersection(*({channel_key(c) for c in names} for names in channel_lists))
    return [c for c in channel_lists[0] if channel_key(c) in shared]


def eeg_channels(run):
    """The EEG channels of a recording: those its quality checks judged."""
    return list(run.result["channels"])


def latest_round(version):
    qc_round = QCRound.objects.filter(version=version).order_by("-created_at", "-id").first()
    if qc_round is None:
        raise FeatureRequestError(
            f"{version}: no quality checks have been asked for; start them on the version's "
            "quality page first")
    return qc_round


def _check_keys(section, data, known):
    unknown = sorted(set(data) - set(known))
    if unknown:
        raise FeatureRequestError(
            f"{section}: unknown setting(s) {', '.join(unknown)}; known: {', '.join(known)}")


def resolve_params(study, pinned, overrides=None):
    """Every parameter of a request: the study protocol's, updated with ``overrides``
    (``{"channels": ..., "preprocessing": {...}, "features": {...}}``); ``pinned`` holds
    (recording, QC run) pairs."""
    recordings = [r for r, _ in pinned]
    overrides = dict(overrides or {})
    _check_keys("parameters", overrides, TOP_LEVEL)
    protocol = current_protocol(study).data
    defaults = {**DEFAULT_PROTOCOL["features"], **protocol.get("features", {})}
    pre_in = dict(overrides.get("preprocessing") or {})
    feat_in = dict(overrides.get("features") or {})
    _check_keys("preprocessing", pre_in, PREPROCESSING_FIELDS)
    _check_keys("features", feat_in, FEATURE_FIELDS)

    rule = overrides.get("channels", defaults["channels"])
    if rule == "common":
        channels = common_channels(eeg_channels(run) for _, run in pinned)
        if len(channels) < 1:
            raise FeatureRequestError(
                "the input recordings share no channel; list the channels to use, or use "
                "'present' for one site")
    elif rule == "present":
        channels = None
    elif isinstance(rule, list) and rule and all(isinstance(c, str) for c in rule):
        channels = [c.strip() for c in rule]
        for recording, run in pinned:
            have = {channel_key(c) for c in eeg_channels(run)}
            missing = [c for c in channels if channel_key(c) not in have]
            if missing:
                raise FeatureRequestError(
                    f"{recording.path} ({recording.version.site.slug}) lacks channel(s) "
                    f"{', '.join(missing)}; choose channels every input has, or 'common'")
    else:
        raise FeatureRequestError("channels: say 'common', 'present' or list channel names")

    passband = protocol["passband"]
    rate = pre_in.get("analysis_sfreq_hz", defaults["analysis_sfreq_hz"])
    if rate is None:
        rate = min(float(r.sfreq_hz) for r in recordings)
    given = {
        "l_freq_hz": passband["l_freq_hz"], "h_freq_hz": passband["h_freq_hz"],
        **{key: defaults[key] for key in ("notch", "bad_channels", "reference", "window_s",
                                          "overlap")},
        **pre_in, "analysis_sfreq_hz": rate, "channels": channels,
    }
    try:
        settings = PrepSettings.from_dict(given)
    except ParamError as exc:
        paths = [p.field if p.field == "channels" else f"preprocessing.{p.field}"
                 for p in exc.problems]
        rest = "".join(f"; {path}: {p.message}"
                       for path, p in zip(paths[1:], exc.problems[1:], strict=True))
        raise FeatureRequestError(exc.problems[0].message + rest, field=paths[0]) from None
    preprocessing = settings.as_dict()
    slowest = min(float(r.sfreq_hz) for r in recordings)
    if preprocessing["analysis_sfreq_hz"] > slowest:
        raise FeatureRequestError(
            f"preprocessing.analysis_sfreq_hz: {preprocessing['analysis_sfreq_hz']:g} Hz is "
            f"above the slowest input ({slowest:g} Hz); recordings are not upsampled")
    features = {
        "bands": feat_in.get("bands", protocol["bands"]),
        "features": feat_in.get("features", defaults.get("features")),
        "params": feat_in.get("params", {}),
        "band_signals": feat_in.get("band_signals", defaults.get("band_signals", [])),
        "welch_segment_s": float(feat_in.get("welch_segment_s", 2.0)),
    }
    band_names = {b["name"] for b in features["bands"]}
    missing = sorted(set(features["band_signals"]) - band_names)
    if missing:
        raise FeatureRequestError(
            f"features.band_signals: {', '.join(missing)} is not a band of the study "
            f"({', '.join(sorted(band_names))})")
    return {"channel_rule": rule if isinstance(rule, str) else "listed",
            "preprocessing": preprocessing, "features": features}


def recording_inputs(recording, run):
    """What a recording contributes: file hash, effective bad channels, rejected segments,
    blocks with their labels, mains, and which quality result decided them."""
    overrides = latest_overrides(recording.version.site, recording.sha256)
    channels = effective_channels(run, overrides)
    return {
        "recording_sha256": recording.sha256,
        "qc": {"settings_digest": run.settings_digest, "code_version": run.code_version,
               "verdict": run.verdict},
        "bad_channels": sorted(name for name, info in channels.items()
                               if info["status"] == "bad"),
        "overrides": sorted([name, item.status] for name, item in overrides.items()),
        "bad_segments": [[s["onset_s"], s["duration_s"]] for s in run.result["segments"]],
        "blocks": [{"onset_s": b.onset_s, "duration_s": b.duration_s,
                    "condition": b.condition, "rating": b.rating, "level": b.level}
                   for b in recording.blocks.all()],
        "power_line_hz": recording.power_line_hz,
    }


def request_feature_set(versions, *, overrides=None, user=None):
    """Find or start the feature set for these dataset versions and parameters.

    Returns (feature_set, created). Raises FeatureRequestError naming what to change.
    """
    versions = sorted({v.pk: v for v in versions}.values(), key=lambda v: v.pk)
    if not versions:
        raise FeatureRequestError("name at least one dataset version")
    studies = {v.study_id for v in versions}
    if len(studies) > 1:
        raise FeatureRequestError("all dataset versions must belong to the same study")
    if len({v.site_id for v in versions}) != len(versions):
        raise FeatureRequestError("give at most one version per site (the newest holds all "
                                  "of a site's recordings)")
    study = versions[0].study
    pinned = []
    for version in versions:
        qc_round = latest_round(version)
        runs = runs_of(qc_round)
        recordings = list(version.recordings.select_related("participant", "version__site")
                          .prefetch_related("blocks").order_by("path"))
        waiting = [r.path for r in recordings if r.sha256 not in runs]
        if waiting:
            raise FeatureRequestError(
                f"{version}: quality checks of {len(waiting)} recording(s) have not finished "
                f"(first: {waiting[0]}); ask again when they are done")
        pinned.extend((r, runs[r.sha256]) for r in recordings)
    if not pinned:
        raise FeatureRequestError("the dataset versions hold no recordings")
    params = resolve_params(study, pinned, overrides)
    inputs = [(r, run, recording_inputs(r, run)) for r, run in pinned]
    digests = [canonical_digest(info) for _, _, info in inputs]
    params_digest = canonical_digest(params)
    key = canonical_digest({"inputs": sorted(digests), "params": params,
                            "code_version": FEATURES_CODE_VERSION})
    with transaction.atomic():
        feature_set, created = FeatureSet.objects.get_or_create(
            key_sha256=key, defaults={"study": study, "params": params,
                                      "params_digest": params_digest,
                                      "code_version": FEATURES_CODE_VERSION,
                                      "created_by": user})
        if not created:
            return feature_set, False
        feature_set.versions.set(versions)
        FeatureSetItem.objects.bulk_create([
            FeatureSetItem(feature_set=feature_set, recording=r, qc_run=run,
                           input_digest=digest, inputs=info)
            for (r, run, info), digest in zip(inputs, digests, strict=True)
        ])
        sites = sorted({v.site.slug for v in versions})
        record("features.requested", actor=user, worker=user is None, target=feature_set,
               site=versions[0].site if len(versions) == 1 else None, study=study,
               summary=f"feature set {feature_set.pk} asked for: {len(inputs)} recordings of "
                       f"{', '.join(sites)}",
               params={"params": params, "params_digest": params_digest,
                       "code_version": FEATURES_CODE_VERSION, "key_sha256": key},
               inputs=[{"dataset_version": v.pk, "manifest_sha256": v.manifest_sha256}
                       for v in versions]
               + [{"qc_run": run.pk, "recording_sha256": r.sha256, "input_digest": d}
                  for (r, run, _), d in zip(inputs, digests, strict=True)])
        enqueue("features.set", target=feature_set, study=study,
                params={"feature_set": feature_set.pk},
                site=versions[0].site if len(versions) == 1 else None, created_by=user)
    return feature_set, True


def latest_versions(study, sites=None):
    """The newest dataset version of each site of the study (optionally only ``sites``)."""
    newest = {}
    query = DatasetVersion.objects.filter(study=study).select_related("site", "study")
    if sites is not None:
        query = query.filter(site__in=sites)
    for version in query.order_by("site_id", "-number"):
        newest.setdefault(version.site_id, version)
    return list(newest.values())


def jobs_of(feature_set):
    return jobs_about("features.", "feature_set", feature_set.pk)


def status_of(feature_set):
    """(state, error words): a set whose recording or combining job failed is failed."""
    return state_with_failures(feature_set, jobs_of(feature_set))
