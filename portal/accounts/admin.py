from django.contrib import admin
from django.contrib.auth import get_user_model
from django.contrib.auth.admin import GroupAdmin as DjangoGroupAdmin
from django.contrib.auth.admin import UserAdmin as DjangoUserAdmin
from django.contrib.auth.models import Group

from portal.accounts.models import ApiToken, LoginFailure, LoginRefusal, Membership, Site, Study
from portal.operator_admin import ReadOnlyAdmin

admin.site.unregister(get_user_model())
admin.site.unregister(Group)


@admin.register(get_user_model())
class UserAdmin(ReadOnlyAdmin, DjangoUserAdmin):
    """Accounts: created by add_member, roles removed by revoke_membership, passwords reset
    by reset_password."""


@admin.register(Group)
class GroupAdmin(ReadOnlyAdmin, DjangoGroupAdmin):
    pass


@admin.register(Study)
class StudyAdmin(ReadOnlyAdmin):
    list_display = ("slug", "name", "created_at")
    search_fields = ("slug", "name")


@admin.register(Site)
class SiteAdmin(ReadOnlyAdmin):
    list_display = ("slug", "name", "created_at")
    search_fields = ("slug", "name")


@admin.register(Membership)
class MembershipAdmin(ReadOnlyAdmin):
    list_display = ("user", "site", "study", "role", "created_at")
    list_filter = ("role", "study", "site")
    search_fields = ("user__username",)


@admin.register(ApiToken)
class ApiTokenAdmin(ReadOnlyAdmin):
    list_display = ("name", "user", "lookup", "scope", "created_at", "expires_at", "last_used_at",
                    "revoked_at")
    exclude = ("digest",)


@admin.register(LoginFailure)
class LoginFailureAdmin(ReadOnlyAdmin):
    list_display = ("username", "address", "at")


@admin.register(LoginRefusal)
class LoginRefusalAdmin(ReadOnlyAdmin):
    list_display = ("key", "window_start", "count", "last_at")
