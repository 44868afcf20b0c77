"""Training runs through the portal: the spec checked against the data, fold jobs, pooled
scores with spread, statistics, releases (skops, model card), approval, downloads, re-runs and
the train command. The learning code's science is checked in tests/unit against
scikit-learn and published formulas; here invented demo data checks the plumbing."""

import hashlib
import io
import json
import subprocess
import sys

import numpy as np
import pytest
from django.core.management import CommandError, call_command
from django.urls import reverse

from portal.audit.models import Event
from portal.datasets import blobs
from portal.training.models import ModelRelease, TrainingRun
from portal.training.services import (
    TrainingRequestError,
    rerun,
    run_report,
    start_run,
)
from tests.helpers import member, run_all_pending
from tests.portal.test_features import compute, ingest

pytestmark = pytest.mark.django_db

TRAINING_JOBS = ("training.run", "training.fold", "training.finish")


def spec_for(feature_set, **changes):
    spec = {
        "feature_set": feature_set.pk,
        "label": {"kind": "level"},
        "features": {"include": ["*.relative_power.*"]},
        "validation": {"scheme": "grouped_kfold", "n_splits": 3},
        "models": [
            {"learner": "lda"},
            {"learner": "logistic"},
            {"ensemble": "bagging", "learner": "lda", "n_members": 3},
            {"ensemble": "stacking", "members": ["lda", "logistic"], "n_inner_splits": 2},
        ],
        "statistics": {"paired_test": True, "paired_splits": 3, "paired_repeats": 2,
                       "permutations": 4, "bootstrap": 200},
        "seed": 3,
    }
    spec.update(changes)
    return spec


@pytest.fixture
def featured(demo_small):
    study, versions = ingest(demo_small, [0, 2])
    feature_set, _ = compute(versions)
    assert feature_set.state == "done"
    return feature_set


def finished(spec, user=None):
    run = start_run(spec, user=user)
    run_all_pending(TRAINING_JOBS)
    return TrainingRun.objects.get(pk=run.pk)


@pytest.mark.venv  # predict_outside builds a new virtual environment and pip-installs into it
def test_a_run_from_spec_to_downloaded_release(client, featured, tmp_path):
    run = finished(spec_for(featured))
    assert run.state == "done", run.error
    models = run.results["models"]
    assert set(models) == {"lda", "logistic", "bagging-lda-3", "stacking-lda+logistic"}
    for result in models.values():
        spread = result["per_fold"]["balanced_accuracy"]
        assert spread["n"] == 3 and spread["sd"] is not None  # never a mean without spread
        assert len(result["fold_scores"]) == 3
        assert result["ci"]["low"] <= result["pooled"]["balanced_accuracy"] <= result["ci"]["high"]
    stats = run.results["statistics"]
    assert {(p["ensemble"], p["learner"]) for p in stats["paired"]} == {
        ("bagging-lda-3", "lda"), ("stacking-lda+logistic", "lda"),
        ("stacking-lda+logistic", "logistic")}
    assert all(p["n_folds"] == 6 for p in stats["paired"])
    assert 0 < stats["permutation"]["p_value"] <= 1

    # One pooled release, awaiting approval; its card repeats the stored scores.
    release = ModelRelease.objects.get(run=run)
    assert release.state == "pending" and release.model == run.results["release_model"]
    with blobs.open_blob(release.card_sha256) as fh:
        card = fh.read().decode()
    ba = models[release.model]["per_fold"]["balanced_accuracy"]
    assert f"{ba['mean']:.3f} ± {ba['sd']:.3f} SD over 3 folds" in card
    assert "Research use only" in card and "not for decisions" in card

    # Sites see it only once the study lead approves; downloads are audited.
    site = featured.sites().order_by("slug").first()
    analyst = member(f"analyst2-{site.slug}", role="analyst", site_slug=site.slug)[0]
    client.force_login(analyst)
    page = reverse("training:releases", args=[site.slug])
    assert f"Release {release.pk}" not in client.get(page).content.decode()
    lead = member("lead", role="study_lead", site_slug=site.slug)[0]
    client.force_login(analyst)
    assert client.post(reverse("training:approve", args=[release.pk]),
                       {"confirm": "yes"}).status_code in (403, 404)
    client.force_login(lead)
    assert client.post(reverse("training:approve", args=[release.pk]),
                       {"confirm": "yes"}).status_code == 302
    client.force_login(analyst)
    body = client.get(page).content.decode()
    assert f"Release {release.pk}" in body and release.model_sha256 in body
    assert "Before you download" in body
    response = client.get(reverse("training:release_file", args=[site.slug, release.pk,
                                                                 "model"]))
    payload = b"".join(response.streaming_content)
    assert hashlib.sha256(payload).hexdigest() == release.model_sha256
    assert Event.objects.filter(verb="download", target_id=str(release.pk)).count() == 1

    # The downloaded model loads with the release's explicit trusted types and predicts what
    # the stored table's rows give in the portal.
    import skops.io

    from cairn_science.learning.run import prepare_data
    from cairn_science.learning.spec import TrainingSpec
    from portal.training.jobs import _table

    model = skops.io.loads(payload, trusted=release.trusted_types)
    data = prepare_data(_table(featured.table_sha256), TrainingSpec.from_dict(run.spec))
    assert set(model.predict(data.X)) <= set(data.labels)

    # Outside the portal, as a site would: the one archive through the portal's URL, a fresh
    # virtual environment with only the archive's requirements and the science package, and
    # the README's own example run on a BIDS recording of the training data.
    response = client.get(reverse("training:release_file", args=[site.slug, release.pk,
                                                                 "bundle"]))
    assert response.status_code == 200
    assert f'filename="release-{release.pk}.zip"' in response["Content-Disposition"]
    archive = tmp_path / f"release-{release.pk}.zip"
    archive.write_bytes(b"".join(response.streaming_content))
    assert hashlib.sha256(archive.read_bytes()).hexdigest() == release.bundle_sha256
    item = featured.items.select_related("recording__version").filter(
        recording__version__site=site, recording__task="disruption").order_by(
        "recording__path").first()
    table = _table(featured.table_sha256)
    mine = table[(table["recording"] == item.recording.path) & (table["site"] == site.slug)]
    expected = model.predict(mine[data.columns].to_numpy(dtype=float)).tolist()
    bids_file = demo_file(featured, item.recording)
    outside = predict_outside(archive, bids_file, item.inputs, tmp_path)
    assert outside["window_start_s"] == mine["window_start_s"].tolist()
    assert outside["predicted"] == expected
    assert outside["classes"] == sorted(data.labels) and outside["proba_argmax"] == expected

    # The run page shows the scores with spread, the statistics and the release.
    client.force_login(lead)
    detail = client.get(reverse("training:detail", args=[run.pk])).content.decode()
    assert "± " in detail and "Nadeau" in detail and "Approve for the sites" not in detail
    assert client.get(reverse("training:plot", args=[run.pk])).status_code == 200


def test_rerun_reproduces_and_the_command_reports(featured, tmp_path):
    spec = spec_for(featured, statistics={"permutations": 0})
    first = finished(spec)
    again = rerun(first, user=None)
    run_all_pending(TRAINING_JOBS)
    again.refresh_from_db()
    assert again.rerun_of_id == first.pk
    for name, result in first.results["models"].items():
        assert again.results["models"][name]["fold_scores"] == result["fold_scores"]
    digests = [ModelRelease.objects.get(run=r).model_digest for r in (first, again)]
    assert digests[0] == digests[1]

    # In a fresh process with empty caches: the same folds, predictions and model digest.
    table = tmp_path / "table.parquet"
    with blobs.open_blob(featured.table_sha256) as fh:
        table.write_bytes(fh.read())
    script = (
        "import json, sys\n"
        "import pandas as pd\n"
        "from cairn_science.learning.spec import TrainingSpec\n"
        "from cairn_science.learning.run import prepare_data, folds_for, fold_result,"
        " build_estimator, needs_groups\n"
        "from cairn_science.learning.canonical import model_digest\n"
        "spec = TrainingSpec.from_dict(json.loads(sys.argv[2]))\n"
        "data = prepare_data(pd.read_parquet(sys.argv[1]), spec)\n"
        "model = next(m for m in spec.models if m.name == sys.argv[3])\n"
        "folds = folds_for(spec, data)\n"
        "out = [fold_result(model, data, f, seed=spec.seed) for f in folds]\n"
        "est = build_estimator(model, seed=spec.seed)\n"
        "kw = {'model__groups': data.participants} if needs_groups(model) else {}\n"
        "est.fit(data.X, data.y, **kw)\n"
        "print(json.dumps({'scores': [r['scores'] for r in out],"
        " 'predicted': [r['predicted'] for r in out], 'digest': model_digest(est)}))\n")
    release = ModelRelease.objects.get(run=first)
    # A fresh process on the same machine, configured as a worker is: its environment (the
    # BLAS kernel chosen, e.g. OPENBLAS_CORETYPE, and one thread per numeric library decide
    # the last bits of fitted coefficients), a new hash seed and empty numba caches.
    import os

    from cairn_science.runtime import THREAD_VARIABLES

    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "numba"), "PYTHONHASHSEED": "7",
           **{name: "1" for name in THREAD_VARIABLES}}
    out = subprocess.run([sys.executable, "-c", script, str(table), json.dumps(first.spec),
                          release.model], capture_output=True, text=True, check=True, env=env,
                         cwd=str(__import__("pathlib").Path(__file__).parents[2]))
    fresh = json.loads(out.stdout)
    stored = sorted(first.folds.filter(model=release.model, purpose="outer"),
                    key=lambda f: f.fold)
    assert fresh["scores"] == [f.result["scores"] for f in stored]
    assert fresh["predicted"] == [f.result["predicted"] for f in stored]
    assert fresh["digest"] == release.model_digest
    # A changed input is a visible mismatch: the table without its first window.
    import pandas as pd

    pd.read_parquet(table).iloc[1:].to_parquet(table)
    changed = first.spec
    out = subprocess.run([sys.executable, "-c", script, str(table), json.dumps(changed),
                          release.model], capture_output=True, text=True, check=True, env=env,
                         cwd=str(__import__("pathlib").Path(__file__).parents[2]))
    assert json.loads(out.stdout)["digest"] != release.model_digest

    # Where the run came from, as W3C PROV-JSON (the PROV data model is the outside
    # reference: the document must deserialize with the prov package and name every file
    # hash of the dataset versions the feature set was made from).
    from prov.model import ProvDocument

    out_file = tmp_path / "run.prov.json"
    call_command("export_provenance", f"training:{first.pk}", "--out", str(out_file))
    document = ProvDocument.deserialize(content=out_file.read_text(), format="json")
    text = out_file.read_text()
    hashes = {f.sha256 for v in featured.versions.all() for f in v.files.all()}
    assert hashes and all(h in text for h in hashes)
    entities = {str(r.identifier) for r in document.get_records() if r.is_element()}
    assert f"cairn:featureset-{featured.pk}" in entities
    assert f"cairn:model-{release.model_sha256}" in entities

    from django.test import Client

    site = featured.sites().order_by("slug").first()
    reader = Client()
    reader.force_login(member("lead", role="study_lead", site_slug=site.slug)[0])
    page = reader.get(reverse("lineage:page", args=["training", first.pk]))
    assert page.status_code == 200 and f"cairn:featureset-{featured.pk}" in page.content.decode()
    reader.force_login(member("dm-one", role="data_manager", site_slug=site.slug)[0])
    assert reader.get(reverse("lineage:page", args=["training", first.pk])).status_code == 404

    # The command prints one JSON object with per-fold and pooled scores and the release.
    path = tmp_path / "spec.json"
    path.write_text(json.dumps(spec))
    buffer = io.StringIO()
    call_command("train", "--spec", str(path), "--json", stdout=buffer)
    started = json.loads(buffer.getvalue())
    assert started["state"] == "running" and started["models"] == {}
    run_all_pending(TRAINING_JOBS)
    report = run_report(TrainingRun.objects.get(pk=started["run"]))
    assert report["state"] == "done"
    lda = report["models"]["lda"]
    assert len(lda["folds"]) == 3 and lda["per_fold"]["balanced_accuracy"]["sd"] is not None
    assert report["models"][report_release_model(report)]["release"] is not None


def demo_file(feature_set, recording):
    """The recording's data file rebuilt from the stored blobs (as a site would have it)."""
    import tempfile
    from pathlib import Path

    from portal.quality.jobs import recording_files

    root = Path(tempfile.mkdtemp(prefix="cairn-bids-"))
    for item in recording_files(recording):
        blobs.copy_blob_to(item.sha256, root / item.path)
    return root / recording.path


def predict_outside(archive, bids_file, inputs, tmp_path):
    """In a new venv (no Django there), install only the requirements the release archive
    lists and the science package without its own dependencies, run the README's example
    with the archive as downloaded, then predict with the portal's inputs for comparison."""
    import os
    import re
    import zipfile
    from pathlib import Path

    repo = Path(__file__).resolve().parents[2]
    venv = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True)
    python = str(venv / "bin" / "python")
    requirements = tmp_path / "requirements.txt"
    with zipfile.ZipFile(archive) as z:
        requirements.write_bytes(z.read("requirements.txt"))
    for args in (["-r", str(requirements)], ["--no-deps", str(repo)]):
        done = subprocess.run([python, "-m", "pip", "install", "--quiet", *args],
                              capture_output=True, text=True, cwd=str(tmp_path))
        assert done.returncode == 0, done.stderr[-3000:]
    env = {**os.environ, "PYTHONPATH": "", "NUMBA_CACHE_DIR": str(tmp_path / "nb")}

    readme = (repo / "README.md").read_text(encoding="utf-8")
    section = readme[readme.index("### Using a release outside the portal"):]
    example = re.search(r"```python\n(.*?)```", section, re.S).group(1)
    example, n_release = re.subn(r"^release = .*$", f"release = {str(archive)!r}", example,
                                 flags=re.M)
    example, n_recording = re.subn(r"^recording = .*$", f"recording = {str(bids_file)!r}",
                                   example, flags=re.M)
    assert n_release == n_recording == 1, "the README's example names release and recording"
    done = subprocess.run([python, "-c", example], capture_output=True, text=True,
                          cwd=str(tmp_path), env=env)
    assert done.returncode == 0, done.stderr[-3000:]
    assert "window_start_s" in done.stdout and "predicted" in done.stdout

    script = (
        "import json, sys\n"
        "import importlib.util\n"
        "assert importlib.util.find_spec('django') is None, 'django must not be needed'\n"
        "from cairn_science.release import predict, predict_proba\n"
        "inputs = json.loads(sys.argv[3])\n"
        "kw = dict(bad_channels=inputs['bad_channels'], bad_segments=inputs['bad_segments'],"
        " power_line_hz=inputs['power_line_hz'])\n"
        "out = predict(sys.argv[1], sys.argv[2], **kw)\n"
        "proba = predict_proba(sys.argv[1], sys.argv[2], **kw)\n"
        "classes = [c for c in proba.columns if c != 'window_start_s']\n"
        "print(json.dumps({'window_start_s': out['window_start_s'].tolist(),"
        " 'predicted': out['predicted'].tolist(), 'classes': sorted(classes),"
        " 'proba_argmax': proba[classes].idxmax(axis=1).tolist()}))\n")
    done = subprocess.run([python, "-c", script, str(archive), str(bids_file),
                           json.dumps(inputs)], capture_output=True, text=True,
                          cwd=str(tmp_path), env=env)
    assert done.returncode == 0, done.stderr[-3000:]
    return json.loads(done.stdout)


def report_release_model(report):
    return next(name for name, m in report["models"].items() if m["release"] is not None)


def test_specs_that_cannot_run_say_why(client, featured, tmp_path):
    with pytest.raises(TrainingRequestError) as caught:
        start_run(spec_for(featured, features={"include": ["*.no_such_feature.*"]}))
    assert "no_such_feature" in str(caught.value)
    with pytest.raises(TrainingRequestError, match=r"models\[0\]\.learner: give one of 'lda'"):
        start_run(spec_for(featured, models=[{"learner": "oracle"}]))
    # Found at submission, not in the worker: "n_splits": "five" names the field.
    with pytest.raises(TrainingRequestError) as caught:
        start_run(spec_for(featured, validation={"scheme": "grouped_kfold",
                                                 "n_splits": "five"}))
    assert caught.value.errors == {
        "validation.n_splits": ["give a whole number of at least 2; got 'five'"]}
    with pytest.raises(TrainingRequestError, match="resting baseline"):
        start_run(spec_for(featured, label={"kind": "condition"},
                           normalisation={"participant": "baseline"}))
    # Possible only to find out on the data: 7 folds for 6 participants.
    run = start_run(spec_for(featured, validation={"scheme": "grouped_kfold", "n_splits": 7}))
    from portal.jobs import runner
    from portal.jobs.models import Job

    job = Job.objects.get(kind="training.run", params__run=run.pk)
    runner.run(job.pk)
    job.refresh_from_db()
    assert job.state == "failed" and "participants" in job.error
    # The same through the API.
    lead = member("lead", role="study_lead",
                  site_slug=featured.sites().order_by("slug").first().slug)[0]
    client.force_login(lead)
    url = reverse("api:training")
    bad = client.post(url, data=json.dumps({"feature_set": featured.pk, "models": [
        {"learner": "oracle"}]}), content_type="application/json")
    assert bad.status_code == 400 and "models[0].learner" in bad.json()["errors"]
    five = client.post(url, data=json.dumps(spec_for(featured, validation={
        "scheme": "grouped_kfold", "n_splits": "five"})), content_type="application/json")
    body = five.json()
    assert five.status_code == 400 and body["field"] == "validation.n_splits"
    assert body["error"] == "validation.n_splits: give a whole number of at least 2; got 'five'"
    assert body["code"] == "bad_request" and body["status"] == 400
    good = client.post(url, data=json.dumps(spec_for(featured)), content_type="application/json")
    assert good.status_code == 201 and good.json()["state"] == "running"
    status = client.get(reverse("api:training_run", args=[good.json()["run"]]))
    assert status.status_code == 200 and status.json()["run"] == good.json()["run"]
    path = tmp_path / "bad.json"
    path.write_text(json.dumps({"feature_set": featured.pk, "modles": []}))
    with pytest.raises(CommandError, match="modles"):
        call_command("train", "--spec", str(path))
    path.write_text(json.dumps(spec_for(featured, validation={"scheme": "grouped_kfold",
                                                              "n_splits": "five"})))
    with pytest.raises(CommandError, match="validation.n_splits: give a whole number of at "
                                           "least 2; got 'five'"):
        call_command("train", "--spec", str(path))


def test_demo_comparison_scores_above_chance(featured):
    """Invented data (the generator lowers alpha and raises theta with workload): a small
    comparison of low against high workload under participant-grouped folds, each
    participant's features referenced to their own mean. Ensembles and baselines are all
    reported with spread, and the best pooled score is above chance by more than the
    binomial spread at this size (about 0.07 for ~50 windows; margin 0.15)."""
    run = finished({"feature_set": featured.pk, "label": {"kind": "level",
                                                          "classes": ["low", "high"]},
                    "features": {"include": ["alpha.relative_power.*",
                                             "theta.relative_power.*"]},
                    "normalisation": {"participant": "mean"},
                    "validation": {"scheme": "grouped_kfold", "n_splits": 3},
                    "comparison": {"strategies": ["bagging", "stacking"],
                                   "learners": ["lda", "logistic"], "members": [3]},
                    "seed": 0})
    assert run.state == "done", run.error
    models = run.results["models"]
    assert {"lda", "logistic", "bagging-lda-3", "stacking-lda-3", "bagging-logistic-3",
            "stacking-logistic-3"} == set(models)
    chance = next(iter(models.values()))["chance"]["balanced_accuracy"]
    assert np.isclose(chance, 0.5)
    assert all(r["per_fold"]["balanced_accuracy"]["sd"] is not None for r in models.values())
    best = max(models.values(), key=lambda r: r["pooled"]["balanced_accuracy"])
    assert best["pooled"]["balanced_accuracy"] > chance + 0.15
    assert best["ci"]["low"] > chance
