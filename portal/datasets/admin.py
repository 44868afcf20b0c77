from django.contrib import admin

from portal.datasets.models import DatasetVersion, Participant, Recording, Upload


@admin.register(Upload)
class UploadAdmin(admin.ModelAdmin):
    list_display = ("id", "site", "study", "state", "source", "label", "created_at")
    list_filter = ("state", "site")


@admin.register(DatasetVersion)
class DatasetVersionAdmin(admin.ModelAdmin):
    list_display = ("id", "site", "study", "number", "created_at")
    readonly_fields = ("site", "study", "number", "upload", "manifest", "manifest_sha256")


admin.site.register(Participant)
admin.site.register(Recording)
admin.site.site_header = "Cairn operator pages"
admin.site.site_title = "Cairn operator pages"
