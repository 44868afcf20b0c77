from django.contrib import admin

from portal.operator_admin import ReadOnlyAdmin
from portal.studies.models import ProtocolVersion


@admin.register(ProtocolVersion)
class ProtocolVersionAdmin(ReadOnlyAdmin):
    """A protocol changes on the study's page, which records the new version."""

    list_display = ("study", "number", "created_by", "created_at", "note")
