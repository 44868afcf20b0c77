"""Uploads, immutable dataset versions, and what they contain."""

from django.conf import settings
from django.db import models
from django.utils import timezone


class UploadMode(models.TextChoices):
    SNAPSHOT = "snapshot", "full snapshot of the site's dataset"
    ADDITION = "addition", "addition to the latest version"


class UploadState(models.TextChoices):
    RECEIVING = "receiving", "receiving files"
    QUEUED = "queued", "waiting for validation"
    VALIDATING = "validating", "validating"
    ACCEPTED = "accepted", "accepted"
    REJECTED = "rejected", "rejected"


class Upload(models.Model):
    site = models.ForeignKey("accounts.Site", on_delete=models.PROTECT, related_name="uploads")
    study = models.ForeignKey("accounts.Study", on_delete=models.PROTECT, related_name="uploads")
    mode = models.CharField(max_length=10, choices=UploadMode.choices, default=UploadMode.SNAPSHOT)
    state = models.CharField(
        max_length=12, choices=UploadState.choices, default=UploadState.RECEIVING, db_index=True
    )
    source = models.CharField(max_length=20, help_text="web, api or command")
    label = models.CharField(max_length=200, blank=True, help_text="Original file or folder name.")
    archive_sha256 = models.CharField(max_length=64, blank=True)
    archive_bytes = models.BigIntegerField(default=0)
    errors = models.JSONField(default=list, blank=True)
    warnings = models.JSONField(default=list, blank=True)
    created_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
        related_name="+",
    )
    created_at = models.DateTimeField(default=timezone.now, db_index=True)
    finished_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["-created_at", "-id"]

    def __str__(self):
        return f"upload {self.pk} from {self.site.slug} ({self.state})"


class DatasetVersion(models.Model):
    """What a site's dataset held after an accepted upload. Never changed once written."""

    site = models.ForeignKey("accounts.Site", on_delete=models.PROTECT, related_name="versions")
    study = models.ForeignKey("accounts.Study", on_delete=models.PROTECT, related_name="versions")
    number = models.PositiveIntegerField()
    upload = models.OneToOneField(Upload, on_delete=models.PROTECT, related_name="version")
    manifest = models.JSONField(help_text="Every file: BIDS path, sha256, size in bytes.")
    manifest_sha256 = models.CharField(max_length=64)
    created_at = models.DateTimeField(default=timezone.now)

    class Meta:
        ordering = ["site", "-number"]
        constraints = [
            models.UniqueConstraint(
                fields=["site", "study", "number"], name="one_version_number_per_site_study"
            )
        ]

    def __str__(self):
        return f"{self.site.slug} v{self.number}"


class Participant(models.Model):
    site = models.ForeignKey("accounts.Site", on_delete=models.PROTECT, related_name="participants")
    label = models.CharField(max_length=64, help_text="BIDS participant label (after 'sub-').")

    class Meta:
        ordering = ["site", "label"]
        constraints = [
            models.UniqueConstraint(fields=["site", "label"], name="one_label_per_site")
        ]

    def __str__(self):
        return f"sub-{self.label} ({self.site.slug})"


class Recording(models.Model):
    version = models.ForeignKey(DatasetVersion, on_delete=models.CASCADE, related_name="recordings")
    participant = models.ForeignKey(
        Participant, on_delete=models.PROTECT, related_name="recordings"
    )
    path = models.CharField(max_length=500, help_text="Data file's path in the BIDS tree.")
    sha256 = models.CharField(max_length=64)
    session = models.CharField(max_length=64, blank=True)
    task = models.CharField(max_length=64)
    run = models.CharField(max_length=16, blank=True)
    sfreq_hz = models.FloatField()
    n_channels = models.PositiveIntegerField()
    duration_s = models.FloatField()
    power_line_hz = models.FloatField(null=True, blank=True)
    condition = models.CharField(max_length=64, blank=True)
    rating = models.PositiveSmallIntegerField(null=True, blank=True)
    level = models.CharField(max_length=64, blank=True)

    class Meta:
        ordering = ["version", "path"]
        constraints = [
            models.UniqueConstraint(fields=["version", "path"], name="one_path_per_version")
        ]

    def __str__(self):
        return self.path
