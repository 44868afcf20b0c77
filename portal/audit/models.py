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
    # A link for convenience only: removing a user must neither change an event (the
    # database refuses that) nor break the chain, so the link is not a database constraint
    # and may point to a removed user; the snapshot below is what the chain covers.
    actor = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.DO_NOTHING,
        db_constraint=False, related_name="+",
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
        indexes = [models.Index(fields=["target_type", "target_id"]),
                   models.Index(fields=["at", "id"], name="audit_event_at_id")]

    def __str__(self):
        return f"{self.at:%Y-%m-%d %H:%M:%S} {self.verb} {self.target_type}:{self.target_id}"

    def save(self, *args, **kwargs):
        if self.pk is not None or kwargs.get("force_update"):
            raise AppendOnlyError("audit events are append-only: they cannot be updated")
        super().save(*args, **kwargs)

    def delete(self, *args, **kwargs):
        raise AppendOnlyError("audit events are append-only: they cannot be deleted")


class ChainLink(models.Model):
    """An event's place in the hash chain: ``hash`` = sha256(``prev_hash`` + the event's
    canonical JSON). Links are appended in short transactions after the event's own commit,
    in one order (``seq``) under the chain's lock; like events, they are never changed."""

    seq = models.BigIntegerField(unique=True)
    event = models.OneToOneField(Event, on_delete=models.PROTECT, related_name="link")
    prev_hash = models.CharField(max_length=64)
    hash = models.CharField(max_length=64)
    sealed_at = models.DateTimeField(default=timezone.now)

    objects = EventQuerySet.as_manager()

    class Meta:
        ordering = ["seq"]

    def save(self, *args, **kwargs):
        if self.pk is not None or kwargs.get("force_update"):
            raise AppendOnlyError("chain links are append-only: they cannot be updated")
        super().save(*args, **kwargs)

    def delete(self, *args, **kwargs):
        raise AppendOnlyError("chain links are append-only: they cannot be deleted")


class ChainHead(models.Model):
    """One row: the newest link's number and hash, and the lock that serialises sealing.
    Verification never trusts it; it only saves reading the whole chain to append."""

    seq = models.BigIntegerField(default=0)
    hash = models.CharField(max_length=64, default="0" * 64)


class PendingLink(models.Model):
    """An event committed but not linked yet (written in the event's own transaction, taken
    by the sealer under the chain's lock). Not part of the record: rows come and go."""

    event = models.OneToOneField(Event, on_delete=models.CASCADE, related_name="+",
                                 primary_key=True)

