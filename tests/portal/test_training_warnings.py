"""The run page repeats the feature set's site-effect warning when the run neither holds out
whole sites nor standardises per site, as the study overview shows it for the feature set.

Common practice, no source: a classifier that can tell the site from the features may score
by recognising the site (the site-effect report's own words say so); leave-one-site-out
validation or per-site standardisation fitted on training folds are the remedies it names.
Plumbing only: the runs are stored, not trained.
"""

import pytest
from django.urls import reverse
from django.utils.html import escape

from portal.accounts.setup import add_site, add_study
from portal.datasets.models import DatasetVersion, Upload
from portal.training.models import TrainingRun
from tests.helpers import member
from tests.portal.objects import feature_set_of

pytestmark = pytest.mark.django_db

SITE_WARNING = ("the site can be told from these features with balanced accuracy 0.91 "
                "(chance 0.50) on participants not seen in training: a classifier may learn "
                "the site, not the workload; consider per-site standardisation (fitted on "
                "training folds only) or leave-one-site-out validation")


@pytest.mark.parametrize("validation, site_standardise, shown", [
    ({"scheme": "grouped_kfold", "n_splits": 5}, False, True),
    ({"scheme": "within_participant_time"}, False, True),
    ({"scheme": "grouped_kfold", "n_splits": 5}, True, False),
    ({"scheme": "leave_one_site_out"}, False, False),
])
def test_run_page_repeats_the_site_effect_warning(client, validation, site_standardise, shown):
    study, _ = add_study("warn-study", name="Warnings")
    site, _ = add_site("warn-site", study_slug=study.slug, name="Warn site")
    upload = Upload.objects.create(site=site, study=study, source="test", label="w.zip",
                                   state="accepted")
    version = DatasetVersion.objects.create(site=site, study=study, number=1, upload=upload,
                                            manifest_sha256="7" * 64)
    feature_set = feature_set_of(site, study, [version], tag="warn")
    feature_set.site_effects = {"applies": True, "warning": SITE_WARNING}
    feature_set.save(update_fields=["site_effects"])
    run = TrainingRun.objects.create(
        study=study, feature_set=feature_set, spec_digest="8" * 64, code_version="test",
        spec={"validation": validation, "models": [],
              "normalisation": {"participant": "none", "site_standardise": site_standardise}})
    client.force_login(member("warn-lead", role="study_lead", site_slug=site.slug)[0])
    page = client.get(reverse("training:detail", args=[run.pk])).content.decode()
    assert (escape(SITE_WARNING) in page) is shown
    assert ("Site effect" in page) is shown
    overview = client.get(reverse("dashboard:study", args=[study.slug])).content.decode()
    assert escape(SITE_WARNING) in overview  # the same words as the study overview's
