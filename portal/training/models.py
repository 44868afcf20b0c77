"""Training runs (a stored spec evaluated on a feature set), their fold scores, and the model
releases made from them."""

from django.conf import settings as django_settings
from django.db import models
from django.utils import timezone


class RunState(models.TextChoices):
    RUNNING = "running", "running"
    DONE = "done", "finished"
    FAILED = "failed", "failed"


class TrainingRun(models.Model):
    study = models.ForeignKey("accounts.Study", on_delete=models.PROTECT,
                              related_name="training_runs")
    feature_set = models.ForeignKey("features.FeatureSet", on_delete=models.PROTECT,
                                    related_name="training_runs")
    spec = models.JSONField()
    spec_digest = models.CharField(max_length=64, db_index=True)
    code_version = models.CharField(max_length=40)
    state = models.CharField(max_length=8, choices=RunState.choices, default=RunState.RUNNING,
                             db_index=True)
    error = models.TextField(blank=True)
    warning = models.TextField(blank=True)
    n_expected = models.PositiveIntegerField(default=0)
    finish_queued = models.BooleanField(default=False)
    data_summary = models.JSONField(default=dict, blank=True)
    results = models.JSONField(default=dict, blank=True)
    rerun_of = models.ForeignKey("self", null=True, blank=True, on_delete=models.SET_NULL,
                                 related_name="reruns")
    created_by = models.ForeignKey(django_settings.AUTH_USER_MODEL, null=True, blank=True,
                                   on_delete=models.SET_NULL, related_name="+")
    created_at = models.DateTimeField(default=timezone.now)
    finished_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["-created_at", "-id"]

    def __str__(self):
        return f"training run {self.pk}"


class FoldScore(models.Model):
    """One model's scores on one fold; ``purpose`` "outer" for the run's own validation,
    "paired" for the repeated grouped folds of the paired comparisons."""

    run = models.ForeignKey(TrainingRun, on_delete=models.CASCADE, related_name="folds")
    model = models.CharField(max_length=120)
    purpose = models.CharField(max_length=8, default="outer")
    fold = models.PositiveIntegerField()
    result = models.JSONField()

    class Meta:
        constraints = [models.UniqueConstraint(fields=["run", "model", "purpose", "fold"],
                                               name="one_score_per_fold")]
        ordering = ["model", "purpose", "fold"]


class ReleaseState(models.TextChoices):
    PENDING = "pending", "awaiting the study lead's approval"
    APPROVED = "approved", "approved for the sites"
    WITHDRAWN = "withdrawn", "withdrawn by the study lead"


#: ModelRelease.kind in words.
RELEASE_KIND_WORDS = {"pooled": "pooled (every site)", "site_only": "this site only"}

#: ModelRelease.scores["evaluation"]: whose evaluation the scores are, in words.
EVALUATION_WORDS = {"pooled": "the pooled model's evaluation",
                    "site_only": "its own evaluation on one site's participants",
                    "none": "no evaluation of its own"}


class ModelRelease(models.Model):
    """A final model fitted on all included data, saved with skops, with its model card, the
    feature specification needed to compute its inputs, and one archive of them all with the
    requirements to install (what a site downloads). ``scores`` is the evaluation of exactly
    this model (a site-only model's own, or none), see ``portal/training/jobs.py``."""

    run = models.ForeignKey(TrainingRun, on_delete=models.PROTECT, related_name="releases")
    model = models.CharField(max_length=120)
    kind = models.CharField(max_length=12, default="pooled")  # pooled | site_only
    trained_on_site = models.ForeignKey("accounts.Site", null=True, blank=True,
                                        on_delete=models.PROTECT, related_name="+")
    model_sha256 = models.CharField(max_length=64)
    model_digest = models.CharField(max_length=64)
    card_sha256 = models.CharField(max_length=64)
    spec_sha256 = models.CharField(max_length=64)
    bundle_sha256 = models.CharField(max_length=64)
    trusted_types = models.JSONField(default=list)
    scores = models.JSONField(default=dict)
    state = models.CharField(max_length=9, choices=ReleaseState.choices,
                             default=ReleaseState.PENDING, db_index=True)
    approved_by = models.ForeignKey(django_settings.AUTH_USER_MODEL, null=True, blank=True,
                                    on_delete=models.SET_NULL, related_name="+")
    approved_at = models.DateTimeField(null=True, blank=True)
    # An approved release taken back: its files are no longer given out (the rows and blobs
    # stay, for the record), and the reason is shown wherever the release is listed.
    withdrawn_by = models.ForeignKey(django_settings.AUTH_USER_MODEL, null=True, blank=True,
                                     on_delete=models.SET_NULL, related_name="+")
    withdrawn_at = models.DateTimeField(null=True, blank=True)
    withdrawal_reason = models.TextField(blank=True)
    created_at = models.DateTimeField(default=timezone.now)

    class Meta:
        ordering = ["-created_at", "-id"]

    def __str__(self):
        return f"release {self.pk} ({self.model})"
