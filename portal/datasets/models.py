"""Uploads, immutable dataset versions, and what they contain."""

from django.conf import settings
from django.db import models
from django.utils import timezone


class UploadMode(models.TextChoices):
    SNAPSHOT = "snapshot", "the whole dataset (replaces the latest version)"
    ADDITION = "addition", "added to the latest version"


class UploadState(models.TextChoices):
    RECEIVING = "receiving", "receiving files"
    QUEUED = "queued", "waiting for validation"
    VALIDATING = "validating", "validating"
    HELD = "held", "waiting for confirmation of removals"
    ACCEPTED = "accepted", "accepted"
    REJECTED = "rejected", "rejected"
    FAILED = "failed", "failed"


#: Upload.source in words.
UPLOAD_SOURCE_WORDS = {"web": "the web form", "api": "the API", "command": "a server command"}


#: States an upload never leaves.
FINAL_UPLOAD_STATES = (UploadState.ACCEPTED, UploadState.REJECTED, UploadState.FAILED)


class Upload(models.Model):
    site = models.ForeignKey("accounts.Site", on_delete=models.PROTECT, related_name="uploads")
    study = models.ForeignKey("accounts.Study", on_delete=models.PROTECT, related_name="uploads")
    mode = models.CharField(max_length=10, choices=UploadMode.choices, default=UploadMode.SNAPSHOT)
    state = models.CharField(
        max_length=12, choices=UploadState.choices, default=UploadState.RECEIVING, db_index=True
    )
    source = models.CharField(max_length=20, help_text="web, api or command")
    label = models.CharField(max_length=200, blank=True, help_text="Original file or folder name.")
    staging_name = models.CharField(
        max_length=100, blank=True, help_text="The archive's file in staging until validated."
    )
    expected_bytes = models.BigIntegerField(null=True, blank=True)
    received = models.JSONField(
        default=list, blank=True, help_text="Byte ranges received so far, as [start, end) pairs."
    )
    archive_sha256 = models.CharField(max_length=64, blank=True)
    archive_bytes = models.BigIntegerField(default=0)
    last_chunk_at = models.DateTimeField(
        null=True, blank=True, help_text="When the last chunk arrived (resumable uploads)."
    )
    errors = models.JSONField(default=list, blank=True)
    warnings = models.JSONField(default=list, blank=True)
    allow_removals = models.BooleanField(
        default=False,
        help_text="The sender confirmed that this snapshot may remove files or participants "
                  "of the latest version.",
    )
    pending_removals = models.JSONField(
        default=dict, blank=True,
        help_text="What the upload would remove (state held): counts, first paths, "
                  "participants and the version it was compared with.",
    )
    failure = models.TextField(
        blank=True, help_text="Why the upload could not be checked (state failed)."
    )
    next_step = models.CharField(
        max_length=300, blank=True, help_text="What a person can do about the failure."
    )
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

    @property
    def is_final(self):
        return self.state in FINAL_UPLOAD_STATES

    def errors_by_file(self):
        """Errors grouped by file, in the order they were found."""
        groups = {}
        for problem in self.errors:
            groups.setdefault(problem.get("path") or "(the upload)", []).append(problem)
        return list(groups.items())


class DatasetVersion(models.Model):
    """What a site's dataset held after an accepted upload. Never changed once written."""

    site = models.ForeignKey("accounts.Site", on_delete=models.PROTECT, related_name="versions")
    study = models.ForeignKey("accounts.Study", on_delete=models.PROTECT, related_name="versions")
    number = models.PositiveIntegerField()
    upload = models.OneToOneField(Upload, on_delete=models.PROTECT, related_name="version")
    parent = models.ForeignKey(
        "self", null=True, blank=True, on_delete=models.PROTECT, related_name="children"
    )
    manifest_sha256 = models.CharField(
        max_length=64, help_text="sha256 of the sorted (path, sha256, bytes) list of its files."
    )
    diff = models.JSONField(
        default=dict, help_text="Paths added, removed and changed since the parent version."
    )
    n_files = models.PositiveIntegerField(default=0)
    total_bytes = models.BigIntegerField(default=0)
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


class VersionFile(models.Model):
    """One file of a dataset version: its BIDS path and the blob holding its bytes."""

    version = models.ForeignKey(DatasetVersion, on_delete=models.CASCADE, related_name="files")
    path = models.CharField(max_length=500)
    sha256 = models.CharField(max_length=64, db_index=True)
    bytes = models.BigIntegerField()
    original_sha256 = models.CharField(
        max_length=64, blank=True, help_text="Hash as uploaded, when a scrubbed copy is kept."
    )

    class Meta:
        ordering = ["version", "path"]
        constraints = [
            models.UniqueConstraint(fields=["version", "path"], name="one_file_per_path")
        ]

    def __str__(self):
        return self.path


class Participant(models.Model):
    """A person, keyed by site and BIDS label: sub-01 of two sites are two people."""

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
    sha256 = models.CharField(max_length=64, db_index=True)
    session = models.CharField(max_length=64, blank=True)
    task = models.CharField(max_length=64)
    acquisition = models.CharField(max_length=64, blank=True)
    run = models.CharField(max_length=16, blank=True)
    sfreq_hz = models.FloatField()
    n_channels = models.PositiveIntegerField()
    channel_names = models.JSONField(default=list)
    duration_s = models.FloatField()
    power_line_hz = models.FloatField(null=True, blank=True)

    class Meta:
        ordering = ["version", "path"]
        constraints = [
            models.UniqueConstraint(fields=["version", "path"], name="one_path_per_version")
        ]

    def __str__(self):
        return self.path


class Block(models.Model):
    """A stretch of a recording under one condition, with its workload rating if any.

    A block is either a whole recording (one run per condition) or an event inside one
    continuous recording.
    """

    recording = models.ForeignKey(Recording, on_delete=models.CASCADE, related_name="blocks")
    onset_s = models.FloatField()
    duration_s = models.FloatField()
    condition = models.CharField(max_length=64, blank=True)
    rating = models.PositiveSmallIntegerField(null=True, blank=True)
    level = models.CharField(max_length=64, blank=True)

    class Meta:
        ordering = ["recording", "onset_s"]

    def __str__(self):
        return f"{self.recording.path} @ {self.onset_s:g} s"
