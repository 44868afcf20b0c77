"""Quality checks: one result per (recording file, settings, code version), grouped by rounds.

A round asks for the checks of every recording of a dataset version under one set of
settings. A recording whose file, settings and code are unchanged reuses the stored result.
"""

from django.conf import settings as django_settings
from django.db import models
from django.utils import timezone

from cairn_science.qc.verdict import VERDICT_WORDS


class Verdict(models.TextChoices):
    PASS = "pass", VERDICT_WORDS["pass"]
    REVIEW = "review", VERDICT_WORDS["review"]
    FAIL = "fail", VERDICT_WORDS["fail"]


class QCRun(models.Model):
    """The checks of one recording file under one set of settings and one code version."""

    site = models.ForeignKey("accounts.Site", on_delete=models.PROTECT, related_name="qc_runs")
    recording_sha256 = models.CharField(max_length=64)
    settings_digest = models.CharField(max_length=64)
    code_version = models.CharField(max_length=40)
    settings = models.JSONField()
    result = models.JSONField()
    verdict = models.CharField(max_length=8, choices=Verdict.choices, db_index=True)
    n_bad_channels = models.PositiveIntegerField(default=0)
    n_channels = models.PositiveIntegerField(default=0)
    rejected_share = models.FloatField(default=0.0)
    created_at = models.DateTimeField(default=timezone.now)

    class Meta:
        constraints = [
            models.UniqueConstraint(
                fields=["site", "recording_sha256", "settings_digest", "code_version"],
                name="one_qc_result_per_input",
            )
        ]
        ordering = ["-created_at"]

    def __str__(self):
        return f"QC {self.recording_sha256[:10]} ({self.verdict})"


class EffectiveVerdict(models.Model):
    """A quality result's verdict and bad-channel count after people's channel decisions.

    The result itself stays as the checks computed it (its hash is in the audit trail);
    this row, written when someone decides on a channel of the recording, holds what pages
    and the overview show. Without a row the checks' own verdict holds.
    """

    run = models.OneToOneField(QCRun, on_delete=models.CASCADE, primary_key=True,
                               related_name="effective")
    verdict = models.CharField(max_length=8, choices=Verdict.choices, db_index=True)
    verdict_reasons = models.JSONField(default=list)
    n_bad_channels = models.PositiveIntegerField(default=0)
    updated_at = models.DateTimeField(default=timezone.now)

    def __str__(self):
        return f"{self.run} after decisions: {self.verdict}"


class QCChannel(models.Model):
    """One channel of one quality result, good or bad by the checks: a plain table so that
    "how often is each channel flagged at each site" is one aggregate query."""

    run = models.ForeignKey(QCRun, on_delete=models.CASCADE, related_name="channel_rows")
    channel = models.CharField(max_length=64)
    bad = models.BooleanField()

    class Meta:
        constraints = [models.UniqueConstraint(fields=["run", "channel"],
                                               name="one_row_per_run_channel")]

    @classmethod
    def rows_for(cls, run):
        return [cls(run=run, channel=name[:64], bad=info.get("status") == "bad")
                for name, info in sorted(run.result.get("channels", {}).items())]


class QCRound(models.Model):
    """The checks of every recording of a dataset version with one set of settings."""

    version = models.ForeignKey(
        "datasets.DatasetVersion", on_delete=models.PROTECT, related_name="qc_rounds"
    )
    settings_digest = models.CharField(max_length=64)
    code_version = models.CharField(max_length=40)
    settings = models.JSONField()
    created_by = models.ForeignKey(
        django_settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
        related_name="+",
    )
    created_at = models.DateTimeField(default=timezone.now)

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["version", "settings_digest", "code_version"],
                                    name="one_round_per_version_and_settings")
        ]
        ordering = ["-created_at", "-id"]

    def __str__(self):
        return f"QC round {self.pk} of {self.version}"


class ChannelStatus(models.TextChoices):
    GOOD = "good", "good"
    BAD = "bad", "bad"


class ChannelOverride(models.Model):
    """A person's decision about one channel of one recording file; the newest one counts."""

    site = models.ForeignKey("accounts.Site", on_delete=models.PROTECT,
                             related_name="channel_overrides")
    recording_sha256 = models.CharField(max_length=64, db_index=True)
    channel = models.CharField(max_length=64)
    status = models.CharField(max_length=4, choices=ChannelStatus.choices)
    reason = models.CharField(max_length=300)
    created_by = models.ForeignKey(
        django_settings.AUTH_USER_MODEL, null=True, on_delete=models.SET_NULL, related_name="+"
    )
    created_at = models.DateTimeField(default=timezone.now)

    class Meta:
        ordering = ["-created_at", "-id"]

    def __str__(self):
        return f"{self.channel} → {self.status}"
