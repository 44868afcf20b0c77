"""Honest numbers on releases and selection, through the portal: a site-only release carries
its own evaluation (or says it has none) next to the pooled model's, labelled; the run page
says how many models were compared, which differences the corrected paired test does not
support, and gives the selection-aware permutation p with the smallest p its count allows;
a release with participant normalisation predicts from a recording given that participant's
reference windows. Invented demo data checks the plumbing here; the statistics themselves
are checked in tests/unit/test_learning_metrics.py."""

import numpy as np
import pytest
from django.urls import reverse
from threadpoolctl import threadpool_limits

from portal.datasets import blobs
from portal.training.forms import TrainingForm
from portal.training.models import ModelRelease
from tests.helpers import member
from tests.portal.test_features import compute, ingest
from tests.portal.test_training import demo_file, finished, spec_for

pytestmark = pytest.mark.django_db


@pytest.fixture
def featured(demo_small):
    """Features of two of the demo's sites (3 participants each)."""
    _, versions = ingest(demo_small, [0, 2])
    feature_set, _ = compute(versions)
    assert feature_set.state == "done"
    return feature_set


def _card(release):
    with blobs.open_blob(release.card_sha256) as fh:
        return fh.read().decode()


def _approve_and_read(client, release, site):
    lead = member("lead", role="study_lead", site_slug=site)[0]
    client.force_login(lead)
    assert client.post(reverse("training:approve", args=[release.pk]),
                       {"confirm": "yes"}).status_code == 302
    return client.get(reverse("training:releases", args=[site])).content.decode()


def test_a_site_only_release_is_scored_on_its_own_site(client, featured):
    """Common practice, no source (a score describes the model it was measured on): the
    site-only model's evaluation is recomputed here independently (the site's rows alone,
    participant-grouped folds from outer_folds over that site's participants, the same
    learner and seed) and must equal what the release stores; it differs from the pooled
    model's, which the release keeps apart and labels as the pooled model's."""
    from cairn_science.learning.run import build_estimator, needs_groups, prepare_data, scheme_of
    from cairn_science.learning.spec import TrainingSpec
    from cairn_science.learning.validation import outer_folds
    from portal.training.jobs import _table

    with threadpool_limits(1):
        run = finished(spec_for(featured, release={"per_site": True},
                                statistics={"permutations": 0}))
    assert run.state == "done", run.error
    pooled = ModelRelease.objects.get(run=run, kind="pooled")
    site_only = list(ModelRelease.objects.filter(run=run, kind="site_only"))
    assert {r.trained_on_site.slug for r in site_only} == {"harrowmere", "saltmarsh"}
    assert pooled.scores["evaluation"] == "pooled"
    spec = TrainingSpec.from_dict(run.spec)
    model = next(m for m in spec.models if m.name == pooled.model)
    table = _table(featured.table_sha256)
    for release in site_only:
        slug = release.trained_on_site.slug
        own = release.scores
        assert own["evaluation"] == "site_only" and own["site"] == slug
        # the folds hold only this site's participants, and all of them are tested once
        data = prepare_data(table[table["site"] == slug], spec)
        people = sorted(set(data.participants.tolist()))
        assert all(p.startswith(f"{slug}/") for p in people)
        tested = [p for fold in own["folds"] for p in fold["test_participants"]]
        assert sorted(tested) == people
        for fold in own["folds"]:
            assert set(fold["train_participants"]) | set(fold["test_participants"]) <= set(
                people)
            assert not set(fold["train_participants"]) & set(fold["test_participants"])
        # recomputed independently
        folds = outer_folds(scheme_of(spec), y=data.y, participants=data.participants,
                            seed=spec.seed)
        recomputed = []
        for fold in folds:
            estimator = build_estimator(model, seed=spec.seed)
            kwargs = {"model__groups": data.participants[fold.train]} if needs_groups(
                model) else {}
            estimator.fit(data.X[fold.train], data.y[fold.train], **kwargs)
            from sklearn.metrics import balanced_accuracy_score

            recomputed.append(balanced_accuracy_score(data.y[fold.test],
                                                      estimator.predict(data.X[fold.test])))
        assert own["per_fold"]["balanced_accuracy"]["n"] == len(folds)
        assert own["per_fold"]["balanced_accuracy"]["mean"] == pytest.approx(
            float(np.mean(recomputed)))
        # it is not the pooled model's evaluation, which is kept apart and labelled
        assert own["per_fold"] != pooled.scores["per_fold"]
        assert own["pooled"]["balanced_accuracy"] != pooled.scores["pooled"]["balanced_accuracy"]
        assert own["pooled_model"]["per_fold"] == pooled.scores["per_fold"]
        card = _card(release)
        mine = own["per_fold"]["balanced_accuracy"]
        theirs = pooled.scores["per_fold"]["balanced_accuracy"]
        assert f"This model's own evaluation, trained and tested on {slug} only" in card
        assert f"{mine['mean']:.3f} ± {mine['sd']:.3f} SD" in card
        assert "The pooled model, not this one" in card
        assert f"{theirs['mean']:.3f} ± {theirs['sd']:.3f} SD" in card
        print(f"\n{slug}: site-only release {release.pk} ({release.model}) own balanced "
              f"accuracy per fold {mine['mean']:.3f} ± {mine['sd']:.3f} over {mine['n']} folds "
              f"(pooled over folds {own['pooled']['balanced_accuracy']:.3f}); the pooled "
              f"model's {theirs['mean']:.3f} ± {theirs['sd']:.3f} over {theirs['n']} folds "
              f"(pooled over folds {pooled.scores['pooled']['balanced_accuracy']:.3f})")
        page = _approve_and_read(client, release, slug)
        assert "This model's own evaluation" in page
        assert "The pooled model's evaluation, not this model's" in page
        assert f"{mine['mean']:.3f}" in page and f"{theirs['mean']:.3f}" in page
    detail = client.get(reverse("training:detail", args=[run.pk])).content.decode()
    assert "its own, on harrowmere's participants only" in detail


def test_a_site_too_small_for_the_scheme_says_it_has_no_evaluation(client, featured):
    """Common practice, no source: 4 participant-grouped folds need 4 participants; the pooled
    set has 6, each site 3, so each site-only release has no evaluation of its own and says
    so on its card, in its scores and on the site's release page, with no score of its own."""
    with threadpool_limits(1):
        run = finished(spec_for(featured, models=[{"learner": "lda"}],
                                validation={"scheme": "grouped_kfold", "n_splits": 4},
                                release={"per_site": True}, statistics={}))
    assert run.state == "done", run.error
    release = ModelRelease.objects.get(run=run, kind="site_only",
                                       trained_on_site__slug="saltmarsh")
    assert release.scores["evaluation"] == "none"
    assert "needs at least 4 participants" in release.scores["no_evaluation"]
    assert "per_fold" not in release.scores and "pooled_model" in release.scores
    card = _card(release)
    assert ("No evaluation of its own: validation by k folds grouped by participant cannot "
            "be run on this site's data") in card
    assert "The scores below are the pooled model's, not this model's" in card
    page = _approve_and_read(client, release, "saltmarsh")
    assert "No evaluation of its own" in page and "Nothing on this page measures this" in page

    # a release stored before releases had an archive gets one from its stored files when the
    # migration runs: the same bytes as the archive made with the release (built
    # deterministically from the same files and requirements)
    import importlib

    from django.apps import apps

    fill = importlib.import_module("portal.training.migrations.0002_release_bundle").fill
    made = release.bundle_sha256
    ModelRelease.objects.filter(pk=release.pk).update(bundle_sha256="")
    fill(apps, None)
    release.refresh_from_db()
    assert release.bundle_sha256 == made


def test_the_run_page_reports_the_selection_and_its_p_value(client, featured):
    """Cawley & Talbot 2010 (from memory; checked on null data in the unit tests): the best of
    several models is optimistic, so the stored permutation test repeats the choice, its p is
    never below the naive p of the chosen model alone (same permutations), the page says how
    many models were compared, shows "no measurable difference" where the corrected paired
    test (Nadeau & Bengio 2003) does not support the lead, and gives the smallest p the
    count allows, 1/(n + 1) (Phipson & Smyth 2010). A model named in the spec was not chosen:
    the page says so and the test has nothing to repeat."""
    with threadpool_limits(1):
        run = finished(spec_for(featured, statistics={"permutations": 49}))
    assert run.state == "done", run.error
    stats = run.results["statistics"]
    selection, test = stats["selection"], stats["permutation"]
    assert selection["how"] == "best" and selection["n_compared"] == 4
    assert test["n_models"] == 4 and test["selection"] == "best"
    assert test["p_value"] >= test["naive_p_value"]
    assert test["min_p_value"] == pytest.approx(1 / 50)
    assert test["n_fits"] <= test["max_fits"] == 49 * 4 * 3
    # three folds give the corrected test little power: some lead is not supported
    assert selection["no_measurable_difference"]
    print(f"\nrun {run.pk}: {test['model']} chosen among {test['n_models']} models; "
          f"selection-aware p = {test['p_value']:.4f}, naive p = {test['naive_p_value']:.4f} "
          f"({test['n_permutations']} permutations, smallest possible p "
          f"{test['min_p_value']:.4f}; {test['n_fits']} of at most {test['max_fits']} fits); "
          f"no measurable difference from {', '.join(selection['no_measurable_difference'])}")

    site = featured.sites().order_by("slug").first().slug
    client.force_login(member("lead", role="study_lead", site_slug=site)[0])
    page = client.get(reverse("training:detail", args=[run.pk])).content.decode()
    assert "4 models were compared on the same outer folds" in page
    assert "no measurable difference from the released model" in page
    assert "released: highest mean, no measurable difference from some others" in page
    assert "chosen for release" not in page
    assert "the smallest p 49 permutations allow being 1/(49 + 1) = 0.0200" in page
    assert f"p = {test['p_value']:.4f}" in page
    assert f"alone would give p = {test['naive_p_value']:.4f}" in page
    assert "each repeating the choice of the best of 4 models" in page
    compare = client.get(reverse("training:compare", args=[run.study.slug])).content.decode()
    assert "no measurable difference from the released model" in compare
    release = ModelRelease.objects.get(run=run)
    card = _card(release)
    assert "the smallest p 49 permutations allow is 1/(49 + 1) = 0.0200" in card
    assert "repeated the choice of the best of 4 models" in card

    with threadpool_limits(1):
        named = finished(spec_for(featured, statistics={"permutations": 9},
                                  release={"model": "logistic"}))
    stats = named.results["statistics"]
    assert stats["selection"]["how"] == "named" and stats["permutation"]["n_models"] == 1
    assert stats["permutation"]["p_value"] == stats["permutation"]["naive_p_value"]
    page = client.get(reverse("training:detail", args=[named.pk])).content.decode()
    assert "was named in the spec (<code>release.model</code>): no selection" in page
    assert "released: named in the spec, no selection" in page
    assert "The model was named in the spec: no selection" in _card(
        ModelRelease.objects.get(run=named))


def test_the_web_form_asks_for_a_usable_number_of_permutations():
    """Phipson & Smyth 2010 (from memory): with n permutations p is at least 1/(n + 1), so
    the form's default must allow p well below 0.05: 200 give 0.005."""
    form = TrainingForm(feature_sets=[])
    assert form.fields["permutations"].initial == 200
    assert 1 / (form.fields["permutations"].initial + 1) < 0.01


def test_a_release_with_participant_normalisation_uses_the_reference_windows(featured):
    """Common practice, no source: a release trained on features referenced to each
    participant's own mean predicts a recording of a participant, given that participant's
    windows as the reference, exactly as the portal's prepared rows (normalised the same way)
    give; without the reference it refuses and names what to pass."""
    from cairn_science.learning.run import prepare_data
    from cairn_science.learning.spec import TrainingSpec
    from cairn_science.release import features_for_recording, load, predict, predict_proba
    from portal.training.jobs import _table

    with threadpool_limits(1):
        run = finished(spec_for(featured, models=[{"learner": "lda"}],
                                normalisation={"participant": "mean"}, statistics={}))
    assert run.state == "done", run.error
    folder = _archive(ModelRelease.objects.get(run=run))
    site = featured.sites().order_by("slug").first()
    item = featured.items.select_related("recording__version").filter(
        recording__version__site=site, recording__task="disruption").order_by(
        "recording__path").first()
    bids_file = demo_file(featured, item.recording)
    with pytest.raises(ValueError, match="own mean over their windows"):
        predict(folder, bids_file)

    table = _table(featured.table_sha256)
    spec = TrainingSpec.from_dict(run.spec)
    data = prepare_data(table, spec)
    person = f"{site.slug}/{item.recording.participant.label}"
    mine = table[(table["site"] == site.slug)
                 & (table["participant"] == item.recording.participant.label)
                 & table["qc_verdict"].isin(spec.include["qc_verdicts"])]
    estimator, features = load(folder)
    reference = mine[features["columns"]]
    rows = np.flatnonzero((data.participants == person)
                          & np.isin(data.rows, table.index[table["recording"]
                                                           == item.recording.path]))
    expected = estimator.predict(data.X[rows]).tolist()
    kwargs = {"bad_channels": item.inputs["bad_channels"],
              "bad_segments": item.inputs["bad_segments"],
              "power_line_hz": item.inputs["power_line_hz"]}
    got = predict(folder, bids_file, baseline_windows=reference, **kwargs)
    recording_rows = table[(table["recording"] == item.recording.path)
                           & (table["site"] == site.slug)]
    labelled = recording_rows.index.isin(data.rows)
    assert got["predicted"].to_numpy()[labelled].tolist() == expected
    proba = predict_proba(folder, bids_file, baseline_windows=reference, **kwargs)
    assert list(proba.columns) == ["window_start_s", *estimator.classes_]
    assert np.allclose(proba[list(estimator.classes_)].sum(axis=1), 1.0)
    picked = np.asarray(estimator.classes_)[proba[list(estimator.classes_)].to_numpy().argmax(
        axis=1)]
    assert picked.tolist() == got["predicted"].tolist()
    assert features_for_recording(bids_file, features, **kwargs).shape[0] == len(got)


def _archive(release):
    import tempfile
    from pathlib import Path

    path = Path(tempfile.mkdtemp(prefix="cairn-release-")) / f"release-{release.pk}.zip"
    with blobs.open_blob(release.bundle_sha256) as fh:
        path.write_bytes(fh.read())
    return path
