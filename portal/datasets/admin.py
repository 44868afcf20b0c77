from django.contrib import admin

from portal.datasets.models import (
    Block,
    DatasetVersion,
    Participant,
    Recording,
    Upload,
    VersionFile,
)


@admin.register(Upload)
class UploadAdmin(admin.ModelAdmin):
    list_display = ("id", "site", "study", "state", "source", "label", "created_at")
    list_filter = ("state", "site")


@admin.register(DatasetVersion)
class DatasetVersionAdmin(admin.ModelAdmin):
    list_display = ("id", "site", "study", "number", "n_files", "created_at")
    readonly_fields = ("site", "study", "number", "upload", "parent", "manifest_sha256", "diff")


for model in (VersionFile, Participant, Recording, Block):
    admin.site.register(model)
admin.site.site_header = "Cairn operator pages"
admin.site.site_title = "Cairn operator pages"
