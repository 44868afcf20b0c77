"""A Job row is the source of truth for background work; Celery messages only wake workers."""

from django.conf import settings
from django.db import models
from django.utils import timezone

from portal.jobs.kinds import KINDS


class JobState(models.TextChoices):
    QUEUED = "queued", "waiting"
    RUNNING = "running", "running"
    DONE = "done", "finished"
    FAILED = "failed", "failed"


class Job(models.Model):
    kind = models.CharField(max_length=40, help_text="One of portal.jobs.kinds.KINDS.")
    state = models.CharField(
        max_length=10, choices=JobState.choices, default=JobState.QUEUED, db_index=True
    )
    target_type = models.CharField(max_length=64, blank=True)
    target_id = models.CharField(max_length=64, blank=True)
    params = models.JSONField(default=dict, blank=True)
    study = models.ForeignKey(
        "accounts.Study", null=True, blank=True, on_delete=models.PROTECT, related_name="jobs"
    )
    site = models.ForeignKey(
        "accounts.Site", null=True, blank=True, on_delete=models.PROTECT, related_name="jobs"
    )
    created_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
        related_name="+",
    )
    progress_done = models.PositiveIntegerField(default=0)
    progress_total = models.PositiveIntegerField(default=0)
    progress_note = models.CharField(max_length=200, blank=True)
    attempts = models.PositiveIntegerField(
        default=0, help_text="Claims not given back: this run and runs whose worker stopped.",
    )
    transient_failures = models.PositiveIntegerField(
        default=0, help_text="Runs retried after a database or connection error.",
    )
    error = models.TextField(blank=True, help_text="What went wrong, in words a person can act on.")
    result = models.JSONField(default=dict, blank=True)
    created_at = models.DateTimeField(default=timezone.now, db_index=True)
    sent_at = models.DateTimeField(null=True, blank=True)
    sends = models.PositiveIntegerField(default=0)
    started_at = models.DateTimeField(null=True, blank=True)
    finished_at = models.DateTimeField(null=True, blank=True)
    heartbeat_at = models.DateTimeField(null=True, blank=True)
    lease_expires_at = models.DateTimeField(null=True, blank=True, db_index=True)
    worker_id = models.CharField(max_length=200, blank=True)
    claim = models.CharField(max_length=32, blank=True, help_text="Token of the current attempt.")

    class Meta:
        ordering = ["-created_at", "-id"]
        indexes = [models.Index(fields=["target_type", "target_id"])]

    def __str__(self):
        return f"job {self.pk} ({self.kind}, {self.state})"

    @property
    def label(self):
        return KINDS[self.kind].label if self.kind in KINDS else self.kind

    @property
    def is_active(self):
        return self.state in (JobState.QUEUED, JobState.RUNNING)

    @property
    def percent(self):
        if self.state == JobState.DONE:
            return 100
        if not self.progress_total:
            return 0
        return min(100, round(100 * self.progress_done / self.progress_total))

    @property
    def elapsed_s(self):
        if self.started_at is None:
            return None
        end = self.finished_at or timezone.now()
        return max(0.0, (end - self.started_at).total_seconds())
