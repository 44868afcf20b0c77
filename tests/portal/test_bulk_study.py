"""The bulk generator of an invented study: counts, the portal's invariants, same seed same
files, the pages render its rows, and the command refuses a taken slug."""

import io
import json

import numpy as np
import pytest
from django.core.management import CommandError, call_command
from django.db.models import Count
from django.urls import reverse

from portal.datasets.models import Block, DatasetVersion, Recording, Upload, UploadState
from portal.demo.bulk import PASSWORD, VERDICT_SHARES, BulkStudyError, make_study
from portal.quality.models import ChannelOverride, QCRound, QCRun
from portal.quality.services import runs_of

pytestmark = pytest.mark.django_db


def latest_recordings(study):
    newest = {}
    for version in DatasetVersion.objects.filter(study=study).order_by("site_id", "-number"):
        newest.setdefault(version.site_id, version)
    return Recording.objects.filter(version__in=newest.values())


def test_counts_blocks_runs_and_verdicts():
    made = make_study(100, slug="bulk-a", seed=1)
    study, sites, counts = made["study"], made["sites"], made["counts"]
    assert len(sites) == 3 and counts["recordings"] == 100
    current = latest_recordings(study)
    assert current.count() == 100
    assert current.values("version__site", "sha256").distinct().count() == 100
    rows = Recording.objects.filter(version__study=study)
    assert rows.count() == counts["recording_rows"] > 100  # version 1's are in version 2 too

    # Every recording row has a low and a high block, levels binned by the study's scale.
    assert set(rows.annotate(n=Count("blocks")).values_list("n", flat=True)) == {2}
    from cairn_science.bids.ratings import Scale
    from portal.studies.models import current_protocol

    scale = Scale.from_dict(current_protocol(study).data["rating_scale"])
    for block in Block.objects.filter(recording__version__study=study):
        assert block.level == scale.level_of(block.rating)
    assert set(Block.objects.filter(recording__version__study=study)
               .values_list("condition", flat=True)) == {"low", "high"}

    # Each version's round finds exactly one result per recording, shared between versions.
    for qc_round in QCRound.objects.filter(version__study=study):
        found = runs_of(qc_round)
        assert set(found) == set(qc_round.version.recordings.values_list("sha256", flat=True))
    assert QCRun.objects.filter(site__in=sites).count() == 100
    for run in QCRun.objects.filter(site__in=sites):
        bad = [n for n, c in run.result["channels"].items() if c["status"] == "bad"]
        assert run.n_bad_channels == len(bad) == len(run.result["bad_channels"])
        assert run.n_channels == len(run.result["channels"])
        assert all(c["reasons"] for c in run.result["channels"].values() if c["status"] == "bad")
        assert run.result["generated"] is True

    verdicts = dict(QCRun.objects.filter(site__in=sites).values_list("verdict")
                    .annotate(n=Count("id")))
    for verdict, share in VERDICT_SHARES.items():
        assert abs(verdicts.get(verdict, 0) / 100 - share) <= 0.03, verdicts

    for site, plan_version in ((s, DatasetVersion.objects.filter(site=s)) for s in sites):
        first, second = plan_version.order_by("number")
        assert second.parent == first and first.parent is None
        assert set(first.recordings.values_list("path", flat=True)) < set(
            second.recordings.values_list("path", flat=True))
        states = sorted(Upload.objects.filter(site=site).values_list("state", flat=True))
        assert states == sorted([UploadState.ACCEPTED] * 2 + [UploadState.REJECTED,
                                                             UploadState.QUEUED])
        rejected = Upload.objects.get(site=site, state=UploadState.REJECTED)
        assert rejected.errors and rejected.errors[0]["message"]
        assert ChannelOverride.objects.filter(site=site).exists()

    feature_set = study.feature_sets.get()
    assert feature_set.state == "done" and feature_set.items.count() == 100
    assert feature_set.params["generated"] is True
    assert feature_set.items.filter(part__isnull=True).count() == 0
    runs = list(study.training_runs.all())
    assert len(runs) == 2 and all(r.state == "done" for r in runs)
    assert all(r.folds.count() == r.n_expected for r in runs)
    assert sorted(r.releases.get().state for r in runs) == ["approved", "pending"]
    assert made["users"]["lead"].check_password(PASSWORD)


def test_same_seed_gives_the_same_files_whatever_the_slug():
    def hashes(slug, seed):
        made = make_study(24, n_sites=2, slug=slug, seed=seed)
        return sorted(latest_recordings(made["study"]).values_list("sha256", flat=True))

    first = hashes("seed-a", 5)
    assert len(first) == 24
    assert hashes("seed-b", 5) == first
    assert hashes("seed-c", 6) != first


def test_generated_pages_render_for_the_study_lead(client):
    made = make_study(40, slug="bulk-pages", seed=2)
    study, lead = made["study"], made["users"]["lead"]
    client.force_login(lead)
    run = QCRun.objects.filter(site__in=made["sites"], n_bad_channels__gt=0).order_by("pk")[0]
    recording = latest_recordings(study).get(sha256=run.recording_sha256)
    qc_round = QCRound.objects.get(version=recording.version)
    page = client.get(reverse("quality:recording", args=[qc_round.pk, recording.pk]))
    assert page.status_code == 200
    text = page.content.decode()
    assert recording.path in text
    bad = next(c for c in run.result["channels"].values() if c["status"] == "bad")
    assert bad["reasons"][0]["words"] in text
    for kind in ("spectrum", "sensors", "timeline"):  # drawn from the generated result
        plot = client.get(reverse("quality:plot", args=[run.pk, kind]))
        assert plot.status_code == 200 and b"<svg" in plot.content, kind

    feature_set = study.feature_sets.get()
    training = study.training_runs.order_by("pk").first()
    rejected = Upload.objects.filter(study=study, state=UploadState.REJECTED).first()
    for url in (reverse("dashboard:study", args=[study.slug]),
                reverse("dashboard:site", args=[made["sites"][1].slug]),
                reverse("quality:round", args=[qc_round.pk]),
                reverse("datasets:version", args=[recording.version_id]),
                reverse("datasets:upload", args=[rejected.pk]),
                reverse("features:detail", args=[feature_set.pk]),
                reverse("training:detail", args=[training.pk]),
                reverse("training:compare", args=[study.slug]),
                reverse("training:plot", args=[training.pk]),
                reverse("training:releases", args=[made["sites"][0].slug])):
        assert client.get(url).status_code == 200, url


def test_generated_quality_results_have_the_shape_of_a_real_run():
    """Plumbing: a generated result has the keys the quality job stores (a real run of
    cairn_science.qc.run_qc_array on invented noise, plus the sensor positions the job adds),
    and its verdict is the one the checks' rule gives from its stored inputs."""
    from cairn_science.qc import run_qc_array
    from cairn_science.qc.settings import QCSettings
    from cairn_science.qc.verdict import effective_verdict

    made = make_study(12, n_sites=2, slug="shape-qc", seed=3)
    names = ["Fp1", "Fp2", "F3", "F4", "C3", "C4", "P3", "P4", "O1", "O2", "Fz", "Cz", "Pz"]
    noise = np.random.default_rng(0).normal(0.0, 10e-6, (len(names), 250 * 70))
    real = run_qc_array(noise, sfreq_hz=250.0, ch_names=names).as_dict()
    real_channel = next(iter(real["channels"].values()))
    runs = QCRun.objects.filter(site__in=made["sites"])
    assert runs.count() == 12
    for run in runs:
        got = run.result
        assert set(got) == set(real) | {"positions", "generated"}
        for key in ("verdict_inputs", "psd", "blinks"):
            assert set(got[key]) == set(real[key]), key
        assert got["psd"]["freqs_hz"] and set(got["psd"]["channels"]) == set(got["channels"])
        for info in got["channels"].values():
            assert set(info) == set(real_channel)
            assert set(info["metrics"]) == set(real_channel["metrics"])
            for reason in info["reasons"]:
                assert set(reason) == {"check", "words", "value", "threshold"}
        again = effective_verdict(got, {}, settings=QCSettings.from_stored(run.settings))
        assert again["verdict"] == run.verdict == got["verdict"]
        # Same channels; the order may differ on PostgreSQL, whose jsonb reorders the keys of
        # the stored channels object that effective_verdict walks (the list keeps its order).
        assert sorted(again["bad_channels"]) == sorted(got["bad_channels"])


def test_generated_training_scores_have_the_shape_of_a_real_run():
    """Plumbing: fold results and pooled model results carry the keys that
    cairn_science.learning.run's fold_result and pooled give for a real (tiny) fit."""
    from cairn_science.learning.run import Data, fold_result, pooled
    from cairn_science.learning.spec import TrainingSpec
    from cairn_science.learning.validation import Fold

    rng = np.random.default_rng(0)
    n = 40
    y = np.array(["low", "high"] * (n // 2))
    people = np.repeat([f"s{i % 2}/p{i}" for i in range(8)], n // 8)
    data = Data(X=rng.normal(size=(n, 3)), y=y, labels=["low", "high"], participants=people,
                sites=np.array([p.split("/")[0] for p in people]), blocks=np.arange(n),
                order=np.zeros(n), columns=["a", "b", "c"], rows=np.arange(n), excluded={})
    model = TrainingSpec.from_dict({"feature_set": 1, "label": {"kind": "level"},
                                    "models": [{"learner": "lda"}]}).models[0]
    half = np.arange(n) < n // 2  # participants p0-p3, then p4-p7
    folds = [Fold(index=k, repeat=0, train=np.flatnonzero(half != bool(k)),
                  test=np.flatnonzero(half == bool(k)), held_out=()) for k in (0, 1)]
    real_folds = [fold_result(model, data, fold, seed=0) for fold in folds]
    real_pooled = pooled(real_folds, data)

    made = make_study(24, n_sites=2, slug="shape-training", seed=4)
    for run in made["study"].training_runs.all():
        for score in run.folds.all():
            assert set(score.result) == set(real_folds[0]) | {"generated"}
            assert set(score.result["scores"]) == set(real_folds[0]["scores"])
        for result in run.results["models"].values():
            assert set(result) == set(real_pooled) | {"fold_scores"}
            for key in ("pooled", "ci", "chance"):
                assert set(result[key]) == set(real_pooled[key]), key
        assert {"selection", "permutation", "paired"} <= set(run.results["statistics"])
        release = run.releases.get()
        assert release.scores["evaluation"] == "pooled"
        assert release.scores["per_fold"] == run.results["models"][release.model]["per_fold"]


def test_command_prints_counts_and_refuses_a_taken_slug():
    out = io.StringIO()
    call_command("bulk_study", "--recordings", "12", "--slug", "bulk-cmd", "--sites", "2",
                 stdout=out)
    summary = json.loads(out.getvalue())
    assert summary["counts"]["recordings"] == 12 and summary["study"] == "bulk-cmd"
    with pytest.raises(CommandError, match="'bulk-cmd' exists already"):
        call_command("bulk_study", "--recordings", "12", "--slug", "bulk-cmd")
    with pytest.raises(CommandError, match="--recordings"):
        call_command("bulk_study", "--recordings", "3", "--slug", "bulk-other")


def test_impossible_requests_name_the_argument():
    with pytest.raises(BulkStudyError, match="n_recordings"):
        make_study(5, n_sites=3, slug="too-few")
    with pytest.raises(BulkStudyError, match="n_sites"):
        make_study(10, n_sites=0, slug="no-sites")
    with pytest.raises(BulkStudyError, match="slug"):
        make_study(10, slug="not a slug")
