"""Null data through the whole portal: features with no label signal at all but a strong
fingerprint of each participant. Participant-grouped validation must score at chance and its
block permutation test must not reject; within-participant (time-ordered) validation scores
far above chance by recognising the people, and every place that shows that score (the run
page, the release page, the model card, the study overview and the site page) says so.

Sources: Saeb et al. 2017, GigaScience 6:1 (record-wise against subject-wise
cross-validation) and Varoquaux et al. 2017, NeuroImage 145:166 (leakage through
non-independent samples), both from memory; the data are invented for this test.
"""

import hashlib
import json

import numpy as np
import pandas as pd
import pytest
from django.urls import reverse
from django.utils.html import escape

from portal.accounts.setup import add_site, add_study
from portal.datasets import blobs
from portal.datasets.models import DatasetVersion, Upload
from portal.features.models import FeatureSet
from portal.training.models import ModelRelease, TrainingRun
from portal.training.services import approve, start_run
from tests.helpers import member, run_all_pending

pytestmark = pytest.mark.django_db

TRAINING_JOBS = ("training.run", "training.fold", "training.finish")
SITES = ("north-null", "south-null")
PER_SITE = 12                 # 6 low and 6 high per site: 12 participants x 2 levels
N_WINDOWS, BLOCK = 40, 10     # 4 blocks of 10 windows per recording
WINDOW_S, OVERLAP = 4.0, 0.5  # 2 s step: neighbouring windows share half their samples
N_FEATURES = 20
FEATURES = [f"alpha.relative_power.E{i:02d}" for i in range(N_FEATURES)]
PERMUTATIONS = 39             # smallest p 1/40 = 0.025: p >= 0.05 can fail


def null_table(seed=0):
    """One recording per participant. Each participant's 20 features are a fixed offset
    (SD 3, the fingerprint) plus independent window noise (SD 1); the level of every block
    is the participant's, drawn for half the participants of each site independently of
    the features (a between-participant design). Nothing in the features says the level."""
    rng = np.random.default_rng(seed)
    rows = []
    for site in SITES:
        levels = rng.permutation(["low"] * (PER_SITE // 2) + ["high"] * (PER_SITE // 2))
        for p in range(PER_SITE):
            offset = rng.normal(0.0, 3.0, N_FEATURES)
            label = f"{p + 1:02d}"
            path = f"sub-{label}/ses-01/eeg/sub-{label}_ses-01_task-shift_eeg.edf"
            for w in range(N_WINDOWS):
                values = offset + rng.normal(0.0, 1.0, N_FEATURES)
                rows.append({"site": site, "participant": label, "session": "01",
                             "task": "shift", "run": None,
                             "window_start_s": w * WINDOW_S * (1 - OVERLAP),
                             "rating": 2 if levels[p] == "low" else 8, "level": levels[p],
                             "condition": levels[p], "recording": path, "acquisition": None,
                             "block_onset_s": (w // BLOCK) * BLOCK * WINDOW_S * (1 - OVERLAP),
                             "qc_verdict": "pass",
                             **dict(zip(FEATURES, values.tolist(), strict=True))})
    return pd.DataFrame(rows)


def null_feature_set():
    """The null table stored as a finished feature set of both sites (as the workers store
    one: Parquet table and column sidecar as blobs, one dataset version per site)."""
    from cairn_science.features.pipeline import frame_to_parquet

    study, _ = add_study("null-study", name="Null study")
    versions = []
    for slug in SITES:
        site, _ = add_site(slug, study_slug=study.slug, name=slug)
        upload = Upload.objects.create(site=site, study=study, source="test",
                                       label=f"{slug}.zip", state="accepted")
        versions.append(DatasetVersion.objects.create(
            site=site, study=study, number=1, upload=upload,
            manifest_sha256=hashlib.sha256(slug.encode()).hexdigest()))
    table = null_table()
    table_sha, size = blobs.put_bytes(frame_to_parquet(table))
    columns = {name: {"kind": "index"} for name in ("site", "participant", "session", "task",
                                                     "run", "window_start_s")}
    columns.update({name: {"kind": "label"} for name in ("rating", "level", "condition")})
    columns.update({name: {"kind": "origin"} for name in ("recording", "acquisition",
                                                          "block_onset_s", "qc_verdict")})
    columns.update({name: {"kind": "feature", "unit": "1"} for name in FEATURES})
    sidecar_sha, _ = blobs.put_bytes(json.dumps({"columns": columns}).encode())
    params = {"channels": None,
              "preprocessing": {"window_s": WINDOW_S, "overlap": OVERLAP, "channels": None},
              "features": {"families": ["spectral"]}}
    feature_set = FeatureSet.objects.create(
        study=study, key_sha256=hashlib.sha256(b"null-set").hexdigest(), params=params,
        params_digest="6" * 64, code_version="test", state="done", table_sha256=table_sha,
        table_bytes=size, sidecar_sha256=sidecar_sha, n_rows=len(table),
        n_columns=len(table.columns))
    feature_set.versions.set(versions)
    return feature_set


def trained(feature_set, validation):
    run = start_run({"feature_set": feature_set.pk, "label": {"kind": "level"},
                     "validation": validation,
                     "models": [{"learner": "knn"}, {"learner": "lda"}],
                     "statistics": {"permutations": PERMUTATIONS}, "seed": 0})
    run_all_pending(TRAINING_JOBS)
    run = TrainingRun.objects.get(pk=run.pk)
    assert run.state == "done", run.error
    return run


def _release_card(body, release):
    """The part of a release page about one release."""
    start = body.index(f"Release {release.pk}:")
    end = body.find('<div class="card">', start)
    return body[start:end if end >= 0 else len(body)]


def test_null_data_grouped_at_chance_within_participant_above_chance_and_warned(client):
    """Grouped 4-fold validation on 24 participants: a new person's fingerprint says nothing
    of their level, so the balanced accuracy is a proportion over about 24 independent
    people (predictions nearly constant per person): binomial SD sqrt(0.25 / 24) = 0.10; a
    score more than 3 SD (0.31) from 0.5 would happen under the null about 3 times in 1,000.
    The permutation test (39 permutations of whole blocks' labels; smallest p 0.025) must
    not reject at 0.05. Within-participant (time-ordered) validation tests the same people
    on their last windows (after a gap of one window): recognising them gives their level,
    so it must clear 0.5 + 3 SD."""
    feature_set = null_feature_set()
    grouped = trained(feature_set, {"scheme": "grouped_kfold", "n_splits": 4})
    within = trained(feature_set, {"scheme": "within_participant_time", "test_share": 0.25})

    spread = 3 * np.sqrt(0.25 / (len(SITES) * PER_SITE))
    for run in (grouped, within):
        for name, result in run.results["models"].items():
            print(f"run {run.pk} {run.spec['validation']['scheme']} {name}: pooled balanced "
                  f"accuracy {result['pooled']['balanced_accuracy']:.3f}")
        permutation = run.results["statistics"]["permutation"]
        print(f"run {run.pk}: permutation p {permutation['p_value']:.3f} "
              f"({permutation['model']}, observed {permutation['observed']:.3f})")
    for name, result in grouped.results["models"].items():
        assert abs(result["pooled"]["balanced_accuracy"] - 0.5) <= spread, name
    assert grouped.results["statistics"]["permutation"]["p_value"] >= 0.05
    best = within.results["release_model"]
    assert within.results["models"][best]["pooled"]["balanced_accuracy"] > 0.5 + spread
    # Left out per person: the windows starting within 2 window lengths (8 s, 4 steps) before
    # the first test window, i.e. 3 of them.
    assert within.data_summary["left_out_in_gaps"] == 3 * len(SITES) * PER_SITE

    # The warning, the same everywhere the within-participant score appears.
    assert grouped.warning == "" and "not generalisation to new people" in within.warning
    warning = escape(within.warning)
    site = feature_set.sites().order_by("slug").first()
    lead = member("null-lead", role="study_lead", site_slug=site.slug)[0]
    client.force_login(lead)
    page = client.get(reverse("training:detail", args=[within.pk])).content.decode()
    assert warning in page and "Read this before the scores" in page
    page = client.get(reverse("training:detail", args=[grouped.pk])).content.decode()
    assert "Read this before the scores" not in page

    releases = {run.pk: ModelRelease.objects.get(run=run, kind="pooled")
                for run in (grouped, within)}
    for release in releases.values():
        assert approve(release, user=lead)
    body = client.get(reverse("training:releases", args=[site.slug])).content.decode()
    within_card = _release_card(body, releases[within.pk])
    assert warning in within_card and "held-out participants" not in within_card
    assert warning not in _release_card(body, releases[grouped.pk])
    with blobs.open_blob(releases[within.pk].card_sha256) as fh:
        card = fh.read().decode()
    assert within.warning in card
    with blobs.open_blob(releases[grouped.pk].card_sha256) as fh:
        assert within.warning not in fh.read().decode()

    overview = client.get(reverse("dashboard:study", args=[feature_set.study.slug]))
    text = overview.content.decode()
    rows = {run.pk: text[text.index(f">run {run.pk}</a>"):] for run in (grouped, within)}
    assert rows[within.pk].split("</tr>")[0].count("known people only") == 1
    assert "known people only" not in rows[grouped.pk].split("</tr>")[0]
    assert f"Run {within.pk}: {warning}" in text
    site_page = client.get(reverse("dashboard:site", args=[site.slug])).content.decode()
    assert site_page.count("known people only") == 1 and warning in site_page

