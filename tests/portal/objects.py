"""Invented objects of one (site, study), stored as the workers store them, for the access
tests: an upload with its version, file, participant and recording, a quality round and
result, a one-window feature set, a finished training run with an approved release, a
reproduction, and one job about each of them. Plumbing only: nothing here is science."""

import hashlib
import io
import json

from portal.accounts.models import ApiToken
from portal.audit.events import describe, record
from portal.datasets import blobs
from portal.datasets.models import DatasetVersion, Participant, Recording, Upload, VersionFile
from portal.features.models import FeatureSet
from portal.jobs.models import Job
from portal.quality.models import QCRound, QCRun


def _sha(*parts):
    return hashlib.sha256("/".join(str(p) for p in parts).encode()).hexdigest()


def fill(site, study, *, owner=None, label=None):
    """Every kind of object of ``site``'s data in ``study``; URL arguments naming them (and,
    under ``jobs``, the id of one job about each kind of object)."""
    tag = label or f"{site.slug}-{study.slug}"
    upload = Upload.objects.create(site=site, study=study, source="test", label=f"{tag}.zip",
                                   state="accepted")
    version = DatasetVersion.objects.create(site=site, study=study, number=1, upload=upload,
                                            manifest_sha256=_sha("manifest", tag))
    sha256, size = blobs.put_stream(io.BytesIO(f"An invented dataset of {tag}.\n".encode()))
    item = VersionFile.objects.create(version=version, path="README", sha256=sha256, bytes=size)
    participant, _ = Participant.objects.get_or_create(site=site, label="01")
    edf_path = "sub-01/eeg/sub-01_task-rest_eeg.edf"
    edf_sha, edf_size = blobs.put_bytes(tiny_edf(tag))
    VersionFile.objects.create(version=version, path=edf_path, sha256=edf_sha, bytes=edf_size)
    recording = Recording.objects.create(
        version=version, participant=participant, path=edf_path,
        sha256=edf_sha, task="rest", sfreq_hz=250.0, n_channels=1,
        channel_names=["Cz"], duration_s=60.0,
    )
    qc_round = QCRound.objects.create(version=version, settings_digest="2" * 64,
                                      code_version="test", settings={})
    run = QCRun.objects.create(
        site=site, recording_sha256=recording.sha256, settings_digest="2" * 64,
        code_version="test", settings={}, verdict="pass", result={
            "channels": {"Cz": {"status": "good", "reasons": [], "metrics": {}}},
            "sfreq_hz": 250.0, "duration_s": 60.0,
            "segments": [], "rejected_share": 0.0, "verdict": "pass", "verdict_reasons": [],
            "psd": {"freqs_hz": [1.0, 2.0], "unit": "dB re 1 µV²/Hz",
                    "channels": {"Cz": [10.0, 8.5]}},
            "positions": {"Cz": [0.0, 0.0, 0.09]},
        })
    feature_set = feature_set_of(site, study, [version], tag=tag)
    training = training_of(study, feature_set)
    record("upload.received", target=upload, site=site, study=study,
           summary=f"{tag}.zip received")
    record("training.requested", target=training["run"], study=study,
           summary=f"training on {tag} requested")
    reproduction = reproduction_of(feature_set)
    jobs = {
        "upload": job_about("upload.validate", upload, site=site, study=study),
        "round": job_about("qc.version", qc_round, site=site, study=study),
        "recording": job_about("qc.recording", recording, site=site, study=study),
        "features": job_about("features.set", feature_set, study=study),
        "training": job_about("training.fold", training["run"], study=study),
        "reproduction": job_about("audit.reproduce", reproduction, study=study),
    }
    token_id = ApiToken.issue(owner, f"{tag} server")[0].pk if owner is not None else None
    return {"study_slug": study.slug, "site_slug": site.slug, "upload_id": upload.pk,
            "job_id": jobs["training"], "jobs": jobs, "token_id": token_id,
            "version_id": version.pk, "file_id": item.pk, "round_id": qc_round.pk,
            "recording_id": recording.pk, "run_id": run.pk, "kind": "spectrum",
            "set_id": feature_set.pk, "fmt": "csv", "plot": "by-site",
            "lineage_kind": "features", "object_id": feature_set.pk, "subject_kind": "features",
            "training_id": training["run"].pk, "release_id": training["release"].pk,
            "part": "card", "label": f"{tag}.zip",
            "objects": {"upload": upload, "version": version, "recording": recording,
                        "qc": run, "features": feature_set, "training": training["run"],
                        "release": training["release"]}}


def tiny_edf(tag, seconds=60, sfreq_hz=250):
    """An EDF file of one channel (Cz) holding an invented 10 Hz wave for ``seconds``, its
    header written by hand (EDF field widths from memory) and naming ``tag``, so that each
    scope's recording is a file of its own that mne reads."""
    import math
    import struct

    wave = [round(400 * math.sin(2 * math.pi * 10 * k / sfreq_hz)) for k in range(sfreq_hz)]
    header = (f"{'0':<8}{'X X X X':<80}{('Startdate 01-JAN-2024 X X ' + tag)[:80]:<80}"
              f"{'01.01.24':<8}{'09.00.00':<8}{512:<8}{'':<44}{seconds:<8}{1:<8}{1:<4}")
    signal = (f"{'Cz':<16}{'AgAgCl electrode':<80}{'uV':<8}{-3200:<8}{3200:<8}{-32768:<8}"
              f"{32767:<8}{'HP:0.1Hz LP:100Hz':<80}{sfreq_hz:<8}{'':<32}")
    return (header + signal).encode("ascii") + struct.pack(f"<{sfreq_hz}h", *wave) * seconds


def job_about(kind, target, *, site=None, study=None):
    target_type, target_id = describe(target)
    return Job.objects.create(kind=kind, site=site, study=study, target_type=target_type,
                              target_id=target_id, result={"note": "invented"}).pk


def feature_set_of(site, study, versions, *, tag):
    """A finished feature set of one invented window, stored as the workers store it."""
    import pandas as pd

    from cairn_science.features.pipeline import frame_to_parquet

    table = pd.DataFrame({"site": [site.slug], "level": ["low"],
                          "alpha.relative_power.Cz": [0.3]})
    table_sha, size = blobs.put_bytes(frame_to_parquet(table))
    sidecar = {"columns": {"site": {"kind": "index"}, "level": {"kind": "label"},
                           "alpha.relative_power.Cz": {"kind": "feature", "unit": "1"}}}
    sidecar_sha, _ = blobs.put_bytes(json.dumps(sidecar).encode())
    feature_set = FeatureSet.objects.create(
        study=study, key_sha256=_sha("set", tag), params={}, params_digest="3" * 64,
        code_version="test", state="done", table_sha256=table_sha, table_bytes=size,
        sidecar_sha256=sidecar_sha, n_rows=1, n_columns=3)
    feature_set.versions.set(versions)
    return feature_set


def training_of(study, feature_set, *, trained_on_site=None, state="approved"):
    """A finished training run with one release (pooled unless ``trained_on_site``)."""
    from portal.training.models import ModelRelease, TrainingRun

    sha, _ = blobs.put_bytes(b"an invented release file\n")
    run = TrainingRun.objects.create(study=study, feature_set=feature_set, spec={
        "validation": {"scheme": "grouped_kfold"}, "models": []}, spec_digest="4" * 64,
        code_version="test", state="done", results={})
    release = ModelRelease.objects.create(
        run=run, model="lda", model_sha256=sha, model_digest="5" * 64, card_sha256=sha,
        spec_sha256=sha, state=state, scores={"per_fold": {}, "scheme": {}},
        kind="site_only" if trained_on_site else "pooled", trained_on_site=trained_on_site)
    return {"run": run, "release": release}


def reproduction_of(feature_set):
    from portal.lineage.models import Reproduction

    return Reproduction.objects.create(subject=f"features:{feature_set.pk}",
                                       original_sha256=feature_set.table_sha256)
