"""The append-only record of every state change: who, when, what, on which object, with what."""

from django.conf import settings
from django.db import models
from django.utils import timezone


class AppendOnlyError(RuntimeError):
    """Raised when code tries to change or remove an audit event."""


class EventQuerySet(models.QuerySet):
    def update(self, **kwargs):
        raise AppendOnlyError("audit events are append-only: they cannot be updated")

    def delete(self):
        raise AppendOnlyError("audit events are append-only: they cannot be deleted")


class ActorKind(models.TextChoices):
    USER = "user", "person"
    TOKEN = "token", "API token"
    WORKER = "worker", "background worker"
    SYSTEM = "system", "operator command or system"


class Event(models.Model):
    """One recorded action. Rows are written once and never changed."""

    at = models.DateTimeField(default=timezone.now, db_index=True)
    verb = models.CharField(max_length=64, db_index=True)
    actor_kind = models.CharField(max_length=10, choices=ActorKind.choices)
    actor = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
        related_name="+",
    )
    # The actor as they were at that moment (username, roles), so removing a user keeps the record.
    actor_snapshot = models.JSONField(default=dict)
    study = models.ForeignKey(
        "accounts.Study", null=True, blank=True, on_delete=models.PROTECT, related_name="+"
    )
    site = models.ForeignKey(
        "accounts.Site", null=True, blank=True, on_delete=models.PROTECT, related_name="+"
    )
    target_type = models.CharField(max_length=64, blank=True)
    target_id = models.CharField(max_length=64, blank=True)
    summary = models.CharField(max_length=300, blank=True)
    params = models.JSONField(default=dict, blank=True)
    inputs = models.JSONField(default=list, blank=True)
    outputs = models.JSONField(default=list, blank=True)
    code_version = models.JSONField(default=dict, blank=True)

    objects = EventQuerySet.as_manager()

    class Meta:
        ordering = ["-at", "-id"]
        indexes = [models.Index(fields=["target_type", "target_id"])]

    def __str__(self):
        return f"{self.at:%Y-%m-%d %H:%M:%S} {self.verb} {self.target_type}:{self.target_id}"

    def save(self, *args, **kwargs):
        if self.pk is not None or kwargs.get("force_update"):
            raise AppendOnlyError("audit events are append-only: they cannot be updated")
        super().save(*args, **kwargs)

    def delete(self, *args, **kwargs):
        raise AppendOnlyError("audit events are append-only: they cannot be deleted")
