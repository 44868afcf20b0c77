from django.contrib import admin

from portal.audit.models import Event
from portal.operator_admin import ReadOnlyAdmin


@admin.register(Event)
class EventAdmin(ReadOnlyAdmin):
    """Audit events are never changed or removed."""

    list_display = ("at", "verb", "actor_kind", "site", "study", "target_type", "target_id")
    list_filter = ("verb", "actor_kind")
