from django.contrib import admin

from portal.audit.models import Event


@admin.register(Event)
class EventAdmin(admin.ModelAdmin):
    """Read-only: audit events are never changed or removed."""

    list_display = ("at", "verb", "actor_kind", "site", "study", "target_type", "target_id")
    list_filter = ("verb", "actor_kind")

    def has_add_permission(self, request):
        return False

    def has_change_permission(self, request, obj=None):
        return False

    def has_delete_permission(self, request, obj=None):
        return False
