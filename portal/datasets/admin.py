from django.contrib import admin

from portal.datasets.models import (
    Block,
    DatasetVersion,
    Participant,
    Recording,
    Upload,
    VersionFile,
)
from portal.operator_admin import ReadOnlyAdmin


@admin.register(Upload)
class UploadAdmin(ReadOnlyAdmin):
    """An upload still receiving or waiting is withdrawn with manage.py withdraw_upload."""

    list_display = ("id", "site", "study", "state", "source", "label", "created_at")
    list_filter = ("state", "site")


@admin.register(DatasetVersion)
class DatasetVersionAdmin(ReadOnlyAdmin):
    list_display = ("id", "site", "study", "number", "n_files", "created_at")


@admin.register(VersionFile)
class VersionFileAdmin(ReadOnlyAdmin):
    list_display = ("path", "version", "bytes", "sha256")


@admin.register(Participant)
class ParticipantAdmin(ReadOnlyAdmin):
    list_display = ("label", "site")


@admin.register(Recording)
class RecordingAdmin(ReadOnlyAdmin):
    list_display = ("path", "version", "task", "sfreq_hz", "n_channels", "duration_s")


@admin.register(Block)
class BlockAdmin(ReadOnlyAdmin):
    list_display = ("recording", "onset_s", "duration_s", "condition", "rating", "level")
