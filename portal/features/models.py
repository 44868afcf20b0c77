"""Feature sets: one comparable table of windowed features over recordings of one or more sites.

A feature set is identified by what went into it (each recording's content and effective
quality result), every parameter, and the code version, so an identical request finds the
same set. Each recording's part is computed once per (inputs, parameters, code) and shared
between sets.
"""

from django.conf import settings as django_settings
from django.db import models
from django.utils import timezone


class FeatureSetState(models.TextChoices):
    RUNNING = "running", "computing"
    DONE = "done", "ready"
    FAILED = "failed", "failed"


class FeatureSet(models.Model):
    study = models.ForeignKey("accounts.Study", on_delete=models.PROTECT,
                              related_name="feature_sets")
    key_sha256 = models.CharField(max_length=64, unique=True)
    params = models.JSONField()
    params_digest = models.CharField(max_length=64)
    code_version = models.CharField(max_length=40)
    versions = models.ManyToManyField("datasets.DatasetVersion", related_name="feature_sets")
    state = models.CharField(max_length=8, choices=FeatureSetState.choices,
                             default=FeatureSetState.RUNNING, db_index=True)
    error = models.TextField(blank=True)
    combine_queued = models.BooleanField(default=False)
    table_sha256 = models.CharField(max_length=64, blank=True)
    table_bytes = models.BigIntegerField(default=0)
    sidecar_sha256 = models.CharField(max_length=64, blank=True)
    n_rows = models.PositiveIntegerField(default=0)
    n_columns = models.PositiveIntegerField(default=0)
    site_effects = models.JSONField(default=dict, blank=True)
    created_by = models.ForeignKey(django_settings.AUTH_USER_MODEL, null=True, blank=True,
                                   on_delete=models.SET_NULL, related_name="+")
    created_at = models.DateTimeField(default=timezone.now)
    finished_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["-created_at", "-id"]

    def __str__(self):
        return f"feature set {self.pk}"

    def sites(self):
        from portal.accounts.models import Site

        return Site.objects.filter(versions__feature_sets=self).distinct()


class RecordingFeatures(models.Model):
    """The features of one recording's windows under one set of parameters and code."""

    site = models.ForeignKey("accounts.Site", on_delete=models.PROTECT,
                             related_name="recording_features")
    recording_sha256 = models.CharField(max_length=64, db_index=True)
    input_digest = models.CharField(max_length=64)
    params_digest = models.CharField(max_length=64)
    code_version = models.CharField(max_length=40)
    table_sha256 = models.CharField(max_length=64, blank=True)
    n_windows = models.PositiveIntegerField(default=0)
    window_counts = models.JSONField(default=dict)
    channel_status = models.JSONField(default=dict)
    steps = models.JSONField(default=list)
    excluded_reason = models.TextField(blank=True)
    created_at = models.DateTimeField(default=timezone.now)

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["input_digest", "params_digest", "code_version"],
                                    name="one_feature_part_per_input")
        ]

    def __str__(self):
        return f"features of {self.recording_sha256[:10]}"


class FeatureSetItem(models.Model):
    """One recording of a feature set, the quality result it used, and its part once done."""

    feature_set = models.ForeignKey(FeatureSet, on_delete=models.CASCADE, related_name="items")
    recording = models.ForeignKey("datasets.Recording", on_delete=models.PROTECT,
                                  related_name="+")
    qc_run = models.ForeignKey("quality.QCRun", on_delete=models.PROTECT, related_name="+")
    input_digest = models.CharField(max_length=64)
    inputs = models.JSONField()
    part = models.ForeignKey(RecordingFeatures, null=True, blank=True,
                             on_delete=models.PROTECT, related_name="items")

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["feature_set", "recording"],
                                    name="one_item_per_recording")
        ]
        ordering = ["id"]
