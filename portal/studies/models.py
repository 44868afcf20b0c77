"""Versioned study protocols: every change is a new version; old ones are kept."""

from django.conf import settings
from django.db import models, transaction
from django.utils import timezone

from cairn_science.canonical_json import canonical_sha256
from portal.studies.protocol import default_protocol, validate_protocol


def protocol_digest(data):
    return canonical_sha256(data, allow_nan=True)


class ProtocolVersion(models.Model):
    study = models.ForeignKey(
        "accounts.Study", on_delete=models.CASCADE, related_name="protocol_versions"
    )
    number = models.PositiveIntegerField()
    data = models.JSONField()
    digest = models.CharField(max_length=64)
    note = models.CharField(max_length=300, blank=True)
    created_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL,
        related_name="+",
    )
    created_at = models.DateTimeField(default=timezone.now)

    class Meta:
        ordering = ["study", "-number"]
        constraints = [
            models.UniqueConstraint(fields=["study", "number"], name="one_number_per_study")
        ]

    def __str__(self):
        return f"{self.study.slug} protocol v{self.number}"


def current_protocol(study):
    """The newest protocol version of a study (creating version 1 from defaults if none)."""
    version = study.protocol_versions.order_by("-number").first()
    if version is None:
        version = save_protocol(study, default_protocol(), user=None, note="initial defaults")
    return version


def save_protocol(study, data, *, user, note=""):
    """Validate and store a new protocol version, with an audit event naming what changed."""
    from portal.audit.events import record

    validate_protocol(data)
    with transaction.atomic():
        previous = (
            ProtocolVersion.objects.select_for_update()
            .filter(study=study).order_by("-number").first()
        )
        if previous is not None and previous.digest == protocol_digest(data):
            return previous
        number = 1 if previous is None else previous.number + 1
        version = ProtocolVersion.objects.create(
            study=study, number=number, data=data, digest=protocol_digest(data), note=note,
            created_by=user,
        )
        changed = sorted(
            key for key in set(data) | set(previous.data if previous else {})
            if previous is None or data.get(key) != previous.data.get(key)
        )
        record(
            "protocol.changed", actor=user, study=study, target=version,
            summary=f"protocol version {number}: {', '.join(changed)}",
            params={"changed": changed, "note": note, "digest": version.digest},
            inputs=(
                [{"protocol_version": previous.pk, "digest": previous.digest}] if previous else []
            ),
            outputs=[{"protocol_version": version.pk, "digest": version.digest}],
        )
    return version
