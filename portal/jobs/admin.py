from django.contrib import admin

from portal.jobs.models import Job


@admin.register(Job)
class JobAdmin(admin.ModelAdmin):
    list_display = ("id", "kind", "state", "progress_done", "progress_total", "attempts",
                    "created_at", "worker_id")
    list_filter = ("state", "kind")
    readonly_fields = [f.name for f in Job._meta.fields]

    def has_add_permission(self, request):
        return False
