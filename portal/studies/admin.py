from django.contrib import admin

from portal.studies.models import ProtocolVersion


@admin.register(ProtocolVersion)
class ProtocolVersionAdmin(admin.ModelAdmin):
    list_display = ("study", "number", "created_by", "created_at", "note")
    readonly_fields = ("study", "number", "data", "digest", "created_by", "created_at", "note")

    def has_add_permission(self, request):
        return False
