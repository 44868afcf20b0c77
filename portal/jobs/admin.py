from django.contrib import admin

from portal.jobs.models import Job
from portal.operator_admin import ReadOnlyAdmin


@admin.register(Job)
class JobAdmin(ReadOnlyAdmin):
    list_display = ("id", "kind", "state", "progress_done", "progress_total", "attempts",
                    "created_at", "worker_id")
    list_filter = ("state", "kind")
