"""The record of the pipeline: every step's events with hashes matching what is stored,
lineage in both directions with other sites summarised, spec differences, and results
computed again from their record.

The outside reference for the provenance documents is the W3C PROV data model (PROV-DM,
W3C Recommendation 2013), as implemented by the ``prov`` package: the export must
deserialise with ``prov.model.ProvDocument.deserialize``.
"""

import hashlib
import io
import json

import pytest
from django.core.management import call_command
from django.urls import reverse

from portal.audit.chain import seal_pending, verify
from portal.audit.events import canonical_sha256
from portal.audit.models import Event
from portal.datasets import blobs
from portal.datasets.models import DatasetVersion, Upload
from portal.features.models import FeatureSet
from portal.lineage.models import Reproduction
from portal.lineage.reproduce import start as start_reproduction
from portal.quality.models import ChannelOverride, QCRound, QCRun
from portal.quality.services import set_override
from portal.studies.models import ProtocolVersion, save_protocol
from portal.training.fingerprint import training_fingerprint
from portal.training.models import ModelRelease, TrainingRun
from portal.training.services import approve, rerun
from tests.helpers import member, run_all_pending, run_pending
from tests.portal.test_training import TRAINING_JOBS, featured, finished, spec_for  # noqa: F401

pytestmark = pytest.mark.django_db

LIBRARIES = ("mne", "mne-bids", "numpy", "scipy", "scikit-learn", "skops", "pandas")


def blob_sha(sha):
    with blobs.open_blob(sha) as fh:
        return hashlib.sha256(fh.read()).hexdigest()


def manifest_of(version):
    rows = sorted((f.path, f.sha256, f.bytes) for f in version.files.all())
    return hashlib.sha256(json.dumps(rows, separators=(",", ":")).encode()).hexdigest()


def one(items, **match):
    found = [i for i in items if all(i.get(k) == v for k, v in match.items())]
    assert len(found) == 1, (match, items)
    return found[0]


# --- what each step's event must say, against the stored object (table of checks) -------

def check_received(event, upload):
    entry = event.inputs[0]
    assert entry["sha256"] == upload.archive_sha256 and entry["bytes"] == upload.archive_bytes


def check_accepted(event, upload):
    assert event.inputs == [{"upload": upload.pk, "sha256": upload.archive_sha256}]


def check_version(event, version):
    out = one(event.outputs, dataset_version=version.pk)
    # The manifest recomputed from the stored file list, and every file's bytes re-hashed.
    assert out["manifest_sha256"] == version.manifest_sha256 == manifest_of(version)
    for item in version.files.all()[:5]:
        assert blob_sha(item.sha256) == item.sha256
    assert one(event.inputs, upload=version.upload_id)["sha256"] == version.upload.archive_sha256


def check_qc_started(event, qc_round):
    assert event.params["settings_digest"] == qc_round.settings_digest
    assert one(event.inputs, dataset_version=qc_round.version_id)["manifest_sha256"] == \
        qc_round.version.manifest_sha256


def check_qc_finished(event, run):
    entry = event.inputs[0]
    assert entry["sha256"] == run.recording_sha256 == blob_sha(run.recording_sha256)
    out = one(event.outputs, qc_run=run.pk)
    assert out["verdict"] == run.verdict and out["result_sha256"] == canonical_sha256(run.result)
    assert event.params["settings_digest"] == run.settings_digest


def check_override(event, override):
    assert event.params["channel"] == override.channel
    assert event.inputs[0]["sha256"] == override.recording_sha256


def check_protocol(event, version):
    assert one(event.outputs, protocol_version=version.pk)["digest"] == version.digest


def check_features_requested(event, feature_set):
    assert event.params["key_sha256"] == feature_set.key_sha256
    assert event.params["params_digest"] == feature_set.params_digest
    for version in feature_set.versions.all():
        assert one(event.inputs, dataset_version=version.pk)["manifest_sha256"] == \
            version.manifest_sha256
    for item in feature_set.items.all():
        assert one(event.inputs, qc_run=item.qc_run_id)["input_digest"] == item.input_digest


def check_features_created(event, feature_set):
    out = event.outputs[0]
    assert out["table_sha256"] == feature_set.table_sha256 == blob_sha(feature_set.table_sha256)
    assert out["sidecar_sha256"] == feature_set.sidecar_sha256
    for item in feature_set.items.select_related("part"):
        entry = one(event.inputs, qc_run=item.qc_run_id)
        assert entry["part_sha256"] == item.part.table_sha256
        if item.part.table_sha256:
            assert blob_sha(item.part.table_sha256) == item.part.table_sha256


def check_training_requested(event, run):
    assert event.params["spec_digest"] == run.spec_digest and event.params["spec"] == run.spec
    assert event.inputs[0]["table_sha256"] == run.feature_set.table_sha256


def check_training_finished(event, run):
    assert one(event.outputs, training_run=run.pk)["fingerprint"] == training_fingerprint(run)
    for release in run.releases.all():
        assert one(event.outputs, release=release.pk)["model_sha256"] == release.model_sha256


def check_release_created(event, release):
    out = event.outputs[0]
    for key in ("model_sha256", "card_sha256", "spec_sha256"):
        assert out[key] == getattr(release, key) == blob_sha(getattr(release, key))
    assert out["model_digest"] == release.model_digest


def check_release_approved(event, release):
    assert event.inputs[0]["model_sha256"] == release.model_sha256


STEPS = [
    # verb, the stored objects it is about, the check of one event against its object
    ("upload.received", lambda: Upload.objects.all(), check_received),
    ("upload.accepted", lambda: Upload.objects.filter(state="accepted"), check_accepted),
    ("dataset_version.created", lambda: DatasetVersion.objects.all(), check_version),
    ("qc.started", lambda: QCRound.objects.all(), check_qc_started),
    ("qc.finished", lambda: QCRun.objects.all(), check_qc_finished),
    ("qc.channel_override", lambda: ChannelOverride.objects.all(), check_override),
    ("protocol.changed", lambda: ProtocolVersion.objects.all(), check_protocol),
    ("features.requested", lambda: FeatureSet.objects.all(), check_features_requested),
    ("features.created", lambda: FeatureSet.objects.all(), check_features_created),
    ("training.requested", lambda: TrainingRun.objects.all(), check_training_requested),
    ("training.finished", lambda: TrainingRun.objects.all(), check_training_finished),
    ("release.created", lambda: ModelRelease.objects.all(), check_release_created),
    ("release.approved", lambda: ModelRelease.objects.filter(state="approved"),
     check_release_approved),
]


@pytest.fixture
def walked(client, featured):  # noqa: F811
    """The small demo consortium from upload to a downloaded model release, with a channel
    override and a protocol change on the way."""
    study = featured.study
    site = featured.sites().order_by("slug").first()
    other = featured.sites().order_by("slug").last()
    lead = member("lead", role="study_lead", site_slug=site.slug)[0]
    run = finished(spec_for(featured, statistics={"permutations": 0}), user=lead)
    release = ModelRelease.objects.get(run=run)
    assert approve(release, user=lead)
    recording = featured.items.select_related("recording__version").filter(
        recording__version__site=site).first().recording
    set_override(site=site, recording=recording, channel=recording.channel_names[0],
                 status="bad", reason="electrode came loose (site log)", user=lead)
    protocol = dict(study.protocol_versions.order_by("-number").first().data) \
        if study.protocol_versions.exists() else None
    if protocol is None:
        from portal.studies.protocol import DEFAULT_PROTOCOL
        protocol = json.loads(json.dumps(DEFAULT_PROTOCOL))
    protocol["features"] = dict(protocol.get("features", {}), window_s=2.0)
    save_protocol(study, protocol, user=lead, note="shorter windows for the next sets")
    analyst = member(f"analyst3-{site.slug}", role="analyst", site_slug=site.slug)[0]
    client.force_login(analyst)
    response = client.get(reverse("training:release_file", args=[site.slug, release.pk,
                                                                 "model"]))
    assert response.status_code == 200
    b"".join(response.streaming_content)
    seal_pending()
    return {"study": study, "site": site, "other": other, "lead": lead, "run": run,
            "release": release, "analyst": analyst, "recording": recording,
            "feature_set": featured}


def test_every_step_writes_its_events_with_matching_hashes(walked):
    for verb, objects, check in STEPS:
        stored = list(objects())
        assert stored, f"the walk made no {verb} object"
        events = list(Event.objects.filter(verb=verb))
        # Exactly one event of the verb per stored object, naming it as its target.
        targets = sorted(int(e.target_id) for e in events)
        assert targets == sorted(o.pk for o in stored), verb
        by_target = {int(e.target_id): e for e in events}
        for obj in stored:
            event = by_target[obj.pk]
            check(event, obj)
            # Who, when and with which code: the actor, UTC time, versions of the libraries.
            assert event.actor_kind in ("user", "worker", "system", "token"), verb
            assert event.at.utcoffset().total_seconds() == 0
            libraries = event.code_version["libraries"]
            assert all(libraries.get(name) for name in LIBRARIES), (verb, libraries)
            if event.actor_kind == "worker":
                assert event.actor_snapshot.get("host"), verb

    # The download names who took which file, with the file's hash.
    release = walked["release"]
    download = Event.objects.get(verb="download", target_id=str(release.pk))
    assert download.actor_id == walked["analyst"].pk
    assert one(download.outputs, release=release.pk)["sha256"] == release.model_sha256
    # And the whole record is one unbroken chain.
    result = verify()
    assert result.ok and result.unsealed == 0


def test_lineage_is_scoped_and_summarises_other_sites(client, walked):
    from prov.model import ProvDocument

    site, other, release = walked["site"], walked["other"], walked["release"]
    mine = DatasetVersion.objects.get(site=site)
    theirs = DatasetVersion.objects.get(site=other)
    my_files = set(mine.files.values_list("sha256", flat=True))
    their_files = set(theirs.files.values_list("sha256", flat=True)) - my_files
    assert their_files

    # A data manager of one site: the pooled release their site may use, in full for their
    # own data, the other site as a summary without files or participants.
    manager = member(f"dm2-{site.slug}", role="data_manager", site_slug=site.slug)[0]
    client.force_login(manager)
    page = client.get(reverse("lineage:page", args=["release", release.pk]))
    assert page.status_code == 200
    body = page.content.decode()
    assert "as summaries" in body and theirs.manifest_sha256 in body
    prov = client.get(reverse("lineage:prov", args=["release", release.pk]))
    text = prov.content.decode()
    document = ProvDocument.deserialize(content=text, format="json")
    assert document.get_records()
    assert all(sha in text for sha in my_files)
    assert not any(sha in text for sha in their_files)
    files = {str(dict(r.attributes).get(next(k for k, _ in r.attributes
                                             if str(k) == "cairn:sha256")))
             for r in document.get_records()
             if any(str(k) == "prov:type" and str(v) == "cairn:File" for k, v in r.attributes)}
    assert files == my_files  # no file (so no participant's recording) of the other site
    # The training run and the feature set themselves stay closed to them, and so does the
    # other site's version in both directions.
    for name, args in (("lineage:page", ["training", walked["run"].pk]),
                       ("lineage:page", ["features", walked["feature_set"].pk]),
                       ("lineage:page", ["version", theirs.pk]),
                       ("lineage:derived", ["version", theirs.pk]),
                       ("lineage:derived", ["features", walked["feature_set"].pk])):
        assert client.get(reverse(name, args=args)).status_code == 404, (name, args)

    # Downstream from their own version: the pooled feature set and its run appear as
    # summaries (sites and hashes, no link); the release they may use is linked.
    derived = client.get(reverse("lineage:derived", args=["version", mine.pk])).content.decode()
    feature_set = walked["feature_set"]
    assert feature_set.table_sha256 in derived and "(summary)" in derived
    assert reverse("features:detail", args=[feature_set.pk]) not in derived
    assert release.model_sha256 in derived

    # The study lead sees the whole lineage, every file of both sites and each step's
    # parameters (the spec, the feature parameters, the quality settings).
    client.force_login(walked["lead"])
    text = client.get(reverse("lineage:prov", args=["release", release.pk])
                      ).content.decode()
    assert all(sha in text for sha in my_files | their_files)
    body = client.get(reverse("lineage:page", args=["release", release.pk])).content.decode()
    for name in ("spec", "params", "settings"):
        assert f"<summary>{name}</summary>" in body
    assert "grouped_kfold" in body
    derived = client.get(reverse("lineage:derived", args=["upload", mine.upload_id])
                         ).content.decode()
    for expected in (f"dataset version {mine.number}", f"feature set {feature_set.pk}",
                     f"training run {walked['run'].pk}", f"model release {release.pk}"):
        assert expected in derived
    recording = walked["recording"]
    derived = client.get(reverse("lineage:derived", args=["recording", recording.pk])
                         ).content.decode()
    assert "quality result" in derived and f"feature set {feature_set.pk}" in derived


def test_two_runs_specs_differ_field_by_field(client, walked):
    first = walked["run"]
    second = TrainingRun.objects.create(
        study=first.study, feature_set=first.feature_set, spec={**first.spec, "seed": 11},
        spec_digest="0" * 64, code_version=first.code_version, state="done")
    client.force_login(walked["lead"])
    body = client.get(reverse("training:spec_diff", args=[first.pk]) + f"?with={second.pk}"
                      ).content.decode()
    assert "<code>seed</code>" in body and "Fields that differ (1)" in body
    same = client.get(reverse("training:spec_diff", args=[first.pk]) + f"?with={first.pk}")
    assert "the same field for field" in same.content.decode()
    client.force_login(walked["analyst"])  # one site only: the pooled runs are not theirs
    assert client.get(reverse("training:spec_diff", args=[first.pk]) + f"?with={second.pk}"
                      ).status_code == 404


def test_results_computed_again_from_the_record(client, walked):
    lead, feature_set, run = walked["lead"], walked["feature_set"], walked["run"]

    # A feature set: every recording recomputed without reusing a part, the same table.
    client.force_login(lead)
    response = client.post(reverse("lineage:reproduce", args=["features", feature_set.pk]))
    assert response.status_code == 302
    assert run_pending("audit.reproduce") == 1
    item = Reproduction.objects.get(subject=f"features:{feature_set.pk}")
    assert item.matches is True and item.new_sha256 == feature_set.table_sha256, item.details
    assert item.details["n_different"] == 0
    page = client.get(reverse("features:detail", args=[feature_set.pk])).content.decode()
    assert "same result" in page

    # A quality result: the same canonical hash; after its stored result is altered, the
    # reproduction says it differs and names the part.
    qc_run = QCRun.objects.filter(site=walked["site"]).order_by("id").first()
    start_reproduction("qc", qc_run, user=lead)
    run_pending("audit.reproduce")
    assert Reproduction.objects.filter(subject=f"qc:{qc_run.pk}").first().matches is True
    altered = dict(qc_run.result, verdict="pass" if qc_run.verdict != "pass" else "fail")
    QCRun.objects.filter(pk=qc_run.pk).update(result=altered)
    qc_run.refresh_from_db()
    start_reproduction("qc", qc_run, user=lead)
    run_pending("audit.reproduce")
    latest = Reproduction.objects.filter(subject=f"qc:{qc_run.pk}").first()
    assert latest.matches is False and latest.details["keys_different"] == ["verdict"]

    # A feature set whose stored table was swapped: the reproduction finds the difference.
    import pandas as pd

    with blobs.open_blob(feature_set.table_sha256) as fh:
        table = pd.read_parquet(fh)
    table.iloc[0, table.columns.get_loc(table.columns[-1])] += 1.0
    buffer = io.BytesIO()
    table.to_parquet(buffer)
    swapped, _ = blobs.put_bytes(buffer.getvalue())
    FeatureSet.objects.filter(pk=feature_set.pk).update(table_sha256=swapped)
    out = io.StringIO()
    feature_set.refresh_from_db()
    start_reproduction("features", feature_set, user=None)
    run_pending("audit.reproduce")
    newest = Reproduction.objects.filter(subject=f"features:{feature_set.pk}").first()
    assert newest.matches is False and newest.new_sha256 == item.new_sha256
    page = client.get(reverse("features:detail", args=[feature_set.pk])).content.decode()
    assert "different result" in page

    # A training run: repeated from its stored spec; the page compares the fingerprints.
    again = rerun(run, user=lead)
    run_all_pending(TRAINING_JOBS)
    body = client.get(reverse("training:detail", args=[again.pk])).content.decode()
    assert "same result" in body and training_fingerprint(again) == training_fingerprint(run)

    # The command: queued without --wait, with the subject named; an unknown one refused.
    call_command("reproduce", f"qc:{qc_run.pk}", "--json", stdout=out)
    assert json.loads(out.getvalue())["subject"] == f"qc:{qc_run.pk}"
    from django.core.management.base import CommandError

    with pytest.raises(CommandError, match="no such object"):
        call_command("reproduce", "qc:999999")
    with pytest.raises(CommandError, match="one of features, qc"):
        call_command("reproduce", "release:1")
    verbs = set(Event.objects.filter(verb__startswith="reproduction.").values_list(
        "verb", flat=True))
    assert verbs == {"reproduction.started", "reproduction.finished"}
