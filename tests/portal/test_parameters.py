"""Parameters through the portal: the science's parameter objects are built when a request
arrives and checked once with their declared limits, problems are shown per field (web form,
API, command), and the stored plain form hashes as before for unchanged values.

The pinned digests below were computed with the code as it was before the parameters moved
to the science's objects (commit 7ee2433's parent): rows and audit events already store
them, so an unchanged value must keep its digest."""

import json
from types import SimpleNamespace

import pytest
from django.core.management import CommandError, call_command

from cairn_science.canonical_json import canonical_sha256
from portal.accounts.setup import add_study
from portal.features.forms import FeatureSetForm
from portal.features.services import FeatureRequestError, resolve_params
from portal.quality.forms import RerunForm
from portal.quality.services import QCRequestError, settings_digest, start_round
from portal.studies.forms import ProtocolForm
from portal.studies.models import protocol_digest
from portal.studies.protocol import ProtocolError, default_protocol, validate_protocol
from portal.training.forms import TrainingForm
from portal.training.services import TrainingRequestError, check_spec

PINNED = {
    "protocol": "e92e1386d364993a14b28f44452ac49916552c4ac5ce6555f6b8de7f3f4bd523",
    "qc": "f6c24634674d7053b445e95443ac67cce10fdaa81d8029af03c56196f987b380",
    "qc_rerun": "ad5d4a54ee33aae5673f19ab5deb0bbc0aee149c9b196927139914958d11a002",
    "features": "91af0b843d00cae0061ff289c76efa7cece9a93b05d88b3bc14b37465fd7c99b",
}
RERUN = {"bad_channel_share_review": 0.1, "bad_channel_share_fail": 0.3,
         "rejected_time_share_review": 0.15, "rejected_time_share_fail": 0.4,
         "min_duration_s": 30.0, "min_sfreq_hz": 100.0}
OVERLAP_WORDS = "give a number from 0 to 0.9; got 0.95"


def _pinned(study):
    """Two recordings (as resolve_params reads them) with their quality results."""
    channels = {name: {} for name in ("Fz", "Cz", "Pz", "T3", "O1")}
    return [(SimpleNamespace(sfreq_hz=sfreq, path=f"sub-0{i}/eeg/x.edf",
                             version=SimpleNamespace(site=SimpleNamespace(slug="a"))),
             SimpleNamespace(result={"channels": dict(channels)}))
            for i, sfreq in enumerate((256.0, 500.0))]


# Unchanged values keep their digests --------------------------------------------------------


def test_default_protocol_and_qc_settings_keep_their_digests():
    assert protocol_digest(default_protocol()) == PINNED["protocol"]
    assert settings_digest(dict(default_protocol()["qc"])) == PINNED["qc"]
    assert settings_digest(dict(RERUN)) == PINNED["qc_rerun"]


@pytest.mark.django_db
def test_feature_parameters_keep_their_digest():
    study, _ = add_study("rail", name="Rail")
    params = resolve_params(study, _pinned(study), {"preprocessing": {"window_s": 2.0}})
    assert canonical_sha256(params) == PINNED["features"]
    # the worker rebuilds the same settings from the stored plain form
    from cairn_science.signal.prepare import PrepSettings

    assert PrepSettings.from_dict(params["preprocessing"]).as_dict() == params["preprocessing"]


# One overlap rule, the same words everywhere ------------------------------------------------


def test_protocol_overlap_rule_is_the_science_rule():
    protocol = default_protocol()
    protocol["features"]["overlap"] = 0.95
    with pytest.raises(ProtocolError) as caught:
        validate_protocol(protocol)
    assert caught.value.errors == {"features.overlap": [OVERLAP_WORDS]}
    protocol["features"]["overlap"] = 0.9
    validate_protocol(protocol)


def test_protocol_form_shows_the_overlap_problem_on_its_field():
    p = default_protocol()
    form = ProtocolForm({**ProtocolForm.initial_from(p), "feature_overlap": 0.95}, protocol=p)
    assert not form.is_valid()
    assert form.errors["feature_overlap"] == [OVERLAP_WORDS]
    form = ProtocolForm({**ProtocolForm.initial_from(p), "feature_overlap": 0.9}, protocol=p)
    assert form.is_valid(), form.errors


def test_feature_form_shows_the_overlap_problem_on_its_field():
    def form(overlap):
        return FeatureSetForm({"sites": ["a"], "overlap": overlap},
                              sites=[SimpleNamespace(slug="a", name="A")], bands=[],
                              features=[])

    refused = form(0.95)
    assert not refused.is_valid()
    assert refused.errors["overlap"] == [OVERLAP_WORDS]
    assert form(0.9).is_valid()


@pytest.mark.django_db
def test_feature_request_overlap_rule_is_the_science_rule():
    """The service refuses 0.95 (formerly accepted there: < 1) naming the field."""
    study, _ = add_study("rail", name="Rail")
    with pytest.raises(FeatureRequestError) as caught:
        resolve_params(study, _pinned(study), {"preprocessing": {"overlap": 0.95}})
    assert str(caught.value) == f"preprocessing.overlap: {OVERLAP_WORDS}"
    assert caught.value.field == "preprocessing.overlap"
    params = resolve_params(study, _pinned(study), {"preprocessing": {"overlap": 0.9}})
    assert params["preprocessing"]["overlap"] == 0.9


# Quality thresholds ------------------------------------------------------------------------


def test_rerun_form_checks_the_thresholds_with_the_science():
    form = RerunForm({**RERUN, "bad_channel_share_review": 0.5},
                     initial_settings=default_protocol()["qc"])
    assert not form.is_valid()
    assert form.errors["bad_channel_share_review"] == [
        "give a review threshold not above bad_channel_share_fail (0.3); got 0.5"]
    form = RerunForm({**RERUN, "min_duration_s": 30}, initial_settings=default_protocol()["qc"])
    assert form.is_valid(), form.errors


def test_a_quality_round_with_bad_thresholds_is_refused_before_anything_is_stored():
    with pytest.raises(QCRequestError) as caught:
        start_round(None, qc_settings={**RERUN, "rejected_time_share_fail": 1.5})
    assert caught.value.errors == {
        "rejected_time_share_fail": ["give a number from 0 to 1; got 1.5"]}


# The training spec: "n_splits": "five" -------------------------------------------------------


def _spec(**validation):
    return {"feature_set": 1, "models": [{"learner": "lda"}],
            "validation": {"scheme": "grouped_kfold", **validation}}


def test_check_spec_refuses_n_splits_five_naming_the_field():
    with pytest.raises(TrainingRequestError) as caught:
        check_spec({**_spec(n_splits="five"), "feature_set": None})
    assert caught.value.errors["validation.n_splits"] == [
        "give a whole number of at least 2; got 'five'"]


def _form_data(**changes):
    return {"feature_set": "1", "label_kind": "level", "scheme": "grouped_kfold",
            "n_splits": 5, "learners": ["lda"], "strategies": ["bagging"], "members": "5",
            "normalisation": "none", "permutations": 0, "seed": 0, **changes}


FEATURE_SETS = [SimpleNamespace(pk=1, n_rows=100)]


def test_training_form_puts_spec_problems_on_their_fields():
    """The web form: a pasted spec with "n_splits": "five" is refused on the spec field,
    naming the spec field; the form's own folds field takes the science's limit."""
    form = TrainingForm(_form_data(spec_json=json.dumps(_spec(n_splits="five"))),
                        feature_sets=FEATURE_SETS)
    assert not form.is_valid()
    assert form.errors["spec_json"] == [
        "validation.n_splits: give a whole number of at least 2; got 'five'"]
    form = TrainingForm(_form_data(n_splits=1), feature_sets=FEATURE_SETS)
    assert not form.is_valid()
    assert form.errors["n_splits"] == ["give a whole number of at least 2; got 1"]
    form = TrainingForm(_form_data(members="5, 1"), feature_sets=FEATURE_SETS)
    assert not form.is_valid() and "members" in form.errors
    assert TrainingForm(_form_data(), feature_sets=FEATURE_SETS).is_valid()


def test_training_form_lists_come_from_the_science_tables():
    from cairn_science.learning.learners import LEARNERS
    from cairn_science.learning.validation import SCHEME_LABELS, Scheme

    form = TrainingForm(feature_sets=FEATURE_SETS)
    assert [name for name, _ in form.fields["learners"].choices] == list(LEARNERS)
    assert dict(form.fields["learners"].choices)["lda"] == LEARNERS["lda"].title
    assert dict(form.fields["scheme"].choices) == SCHEME_LABELS
    assert form.fields["n_splits"].initial == Scheme().n_splits


@pytest.mark.django_db
def test_train_command_refuses_n_splits_five(tmp_path):
    path = tmp_path / "spec.json"
    path.write_text(json.dumps({**_spec(n_splits="five"), "feature_set": "x"}))
    with pytest.raises(CommandError) as caught:
        call_command("train", "--spec", str(path))
    assert "validation.n_splits: give a whole number of at least 2; got 'five'" in str(
        caught.value)
