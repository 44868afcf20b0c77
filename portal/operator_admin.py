"""The operator pages (Django's admin at /operator/) show data; they never change it.

Accepted data and its record are immutable, and accounts change only through management
commands that record an audit event, so every page here is read-only for everyone.
"""

from django.contrib import admin

#: Where an operator who must change something is sent (the admin index says it).
COMMANDS = ("add_study, add_site, add_member, revoke_membership, revoke_token, reset_password, "
            "withdraw_upload")


class ReadOnlyAdmin(admin.ModelAdmin):
    """Viewing only: no add, change or delete page, and no bulk delete action."""

    def has_add_permission(self, request, obj=None):
        return False

    def has_change_permission(self, request, obj=None):
        return False

    def has_delete_permission(self, request, obj=None):
        return False


admin.site.site_header = "Cairn operator pages"
admin.site.site_title = "Cairn operator pages"
admin.site.index_title = (f"Read-only. Changes are made with manage.py commands, which record "
                          f"an audit event: {COMMANDS}")
