"""Reproductions: stored results computed again from their record."""

from django.conf import settings
from django.db import models
from django.utils import timezone


class Reproduction(models.Model):
    """A stored result computed again from its record (inputs, settings, code) in a fresh
    worker, and whether the new result's canonical hash equals the stored one."""

    subject = models.CharField(max_length=40, db_index=True)  # "features:5", "qc:12"
    original_sha256 = models.CharField(max_length=64)
    new_sha256 = models.CharField(max_length=64, blank=True)
    matches = models.BooleanField(null=True)
    details = models.JSONField(default=dict, blank=True)
    error = models.TextField(blank=True)
    created_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, blank=True,
                                   on_delete=models.SET_NULL, related_name="+")
    created_at = models.DateTimeField(default=timezone.now)
    finished_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        # The table it had when it lived in the audit app: moved without copying rows.
        db_table = "audit_reproduction"
        ordering = ["-created_at", "-id"]

    def __str__(self):
        return f"reproduction of {self.subject}"
