"""Recurrent learners through the portal: each of the four (GRU, LSTM, bidirectional GRU and
LSTM) and a stacking that mixes them with a feature learner train under participant-grouped
validation on the demo's features, with the paired comparisons, and the stacking's release
predicts a recording through the README's ``predict``; on null data (no label signal, strong
participant fingerprints) they stay at chance under grouped validation.

Invented demo data checks the plumbing here (tests/unit/test_learning_recurrent.py checks the
sequences and the network). The null-data bound is the one of tests/portal/
test_null_leakage.py (binomial spread over about 24 independent people; Saeb et al. 2017 and
Varoquaux et al. 2017 there, from memory).
"""

import zipfile

import numpy as np
import pytest

from portal.training.models import ModelRelease
from tests.portal.test_training import demo_file, finished
from tests.portal.test_training_releases import _archive, featured  # noqa: F401 (fixture)

pytest.importorskip("torch")
pytestmark = pytest.mark.django_db

TINY = {"hidden": [8, 4], "n_windows": 3, "epochs": 8, "batch_size": 32}
NULL = {**TINY, "batch_size": 96}  # 720 training rows a fold: fewer steps
RECURRENT = ("gru", "lstm", "bigru", "bilstm")
MIXED = "stacking-gru+bilstm+logistic"


def test_recurrent_learners_and_a_mixed_stacking_under_grouped_folds(featured):  # noqa: F811
    from cairn_science.learning.run import model_inputs, prepare_data
    from cairn_science.learning.spec import TrainingSpec
    from cairn_science.release import load, predict, predict_proba
    from portal.training.jobs import _table

    run = finished({
        "feature_set": featured.pk, "label": {"kind": "level"},
        "features": {"include": ["*.relative_power.*"]},
        "validation": {"scheme": "grouped_kfold", "n_splits": 3},
        "models": [*({"learner": name, "params": TINY} for name in RECURRENT),
                   {"learner": "logistic"},
                   {"ensemble": "stacking", "members": ["gru", "bilstm", "logistic"],
                    "n_inner_splits": 2}],
        "statistics": {"paired_test": True, "paired_splits": 2, "paired_repeats": 1},
        "release": {"model": MIXED}, "seed": 1})
    assert run.state == "done", run.error
    models = run.results["models"]
    assert set(models) == {*RECURRENT, "logistic", MIXED}
    for result in models.values():
        spread = result["per_fold"]["balanced_accuracy"]
        assert spread["n"] == 3 and spread["sd"] is not None
        assert 0.0 <= result["pooled"]["balanced_accuracy"] <= 1.0
    paired = {(p["ensemble"], p["learner"]) for p in run.results["statistics"]["paired"]}
    assert paired == {(MIXED, "gru"), (MIXED, "bilstm"), (MIXED, "logistic")}

    # The mixed stacking's release: its types are declared, and predict() as the README
    # shows gives, on a recording whose windows are all labelled, what the fitted pipeline
    # gives on the portal's rows of that recording.
    release = ModelRelease.objects.get(run=run)
    assert release.model == MIXED
    assert "cairn_science.learning.recurrent.RecurrentClassifier" in release.trusted_types
    assert not any("torch" in t for t in release.trusted_types)
    folder = _archive(release)
    with zipfile.ZipFile(folder) as archive:  # the release needs PyTorch to predict
        assert "torch==" in archive.read("requirements.txt").decode()
    estimator, features = load(folder)
    table = _table(featured.table_sha256)
    spec = TrainingSpec.from_dict(run.spec)
    data = prepare_data(table, spec)
    model = next(m for m in spec.models if m.name == MIXED)
    X = model_inputs(model, data, data.X)
    site = featured.sites().order_by("slug").first()
    items = featured.items.select_related("recording__version").filter(
        recording__version__site=site, recording__task="disruption").order_by(
        "recording__path")
    compared = 0
    for item in items:
        path = item.recording.path
        rows = np.flatnonzero(np.isin(data.rows, table.index[(table["recording"] == path)
                                                             & (table["site"] == site.slug)]))
        in_table = ((table["recording"] == path) & (table["site"] == site.slug)).sum()
        if rows.size < 3 or rows.size != in_table:
            continue
        kwargs = {"bad_channels": item.inputs["bad_channels"],
                  "bad_segments": item.inputs["bad_segments"],
                  "power_line_hz": item.inputs["power_line_hz"]}
        bids_file = demo_file(featured, item.recording)
        got = predict(folder, bids_file, **kwargs)
        assert got["window_start_s"].tolist() == sorted(data.order[rows].tolist())
        expected = estimator.predict(X[rows][np.argsort(data.order[rows], kind="stable")])
        assert got["predicted"].tolist() == expected.tolist()
        proba = predict_proba(folder, bids_file, **kwargs)
        assert np.allclose(proba[list(estimator.classes_)].sum(axis=1), 1.0)
        compared += 1
        break
    assert compared == 1, "no fully labelled recording of at least 3 windows to compare"


def test_null_data_stays_at_chance_with_recurrent_learners():
    """The null table of test_null_leakage (24 participants, one recording each, features a
    person's fingerprint plus noise, the level the person's, unrelated to the features):
    under grouped 4-fold validation each recurrent learner and a bagging by participant of
    one of them score within 0.5 +- 0.31 (3 binomial SD over 24 people) of balanced accuracy."""
    from cairn_science.learning.run import evaluate, prepare_data
    from cairn_science.learning.spec import TrainingSpec
    from tests.portal.test_null_leakage import FEATURES, SITES, WINDOW_S, null_table

    spec = TrainingSpec.from_dict(
        {"feature_set": 1, "label": {"kind": "level"}, "seed": 0,
         "validation": {"scheme": "grouped_kfold", "n_splits": 4},
         "models": [*({"learner": name, "params": NULL} for name in RECURRENT),
                    {"ensemble": "bagging", "learner": "bilstm", "params": NULL,
                     "n_members": 3}]},
        columns=FEATURES, sites=list(SITES))
    data = prepare_data(null_table(), spec, window_s=WINDOW_S)
    out = evaluate(spec, data)
    assert set(out) == {*RECURRENT, "bagging-bilstm-3"}
    for name, result in out.items():
        score = result["pooled"]["balanced_accuracy"]
        assert abs(score - 0.5) <= 0.31, (name, score)


def test_the_training_form_offers_the_recurrent_learners_from_the_table():
    from portal.training.forms import TrainingForm

    offered = dict(TrainingForm(feature_sets=[]).fields["learners"].choices)
    assert {name: offered.get(name) for name in RECURRENT} == {
        "gru": "GRU network", "lstm": "LSTM network", "bigru": "bidirectional GRU network",
        "bilstm": "bidirectional LSTM network"}
