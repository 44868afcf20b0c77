from django.contrib import admin

from portal.accounts.models import ApiToken, LoginFailure, Membership, Site, Study


@admin.register(Study)
class StudyAdmin(admin.ModelAdmin):
    list_display = ("slug", "name", "created_at")
    search_fields = ("slug", "name")


@admin.register(Site)
class SiteAdmin(admin.ModelAdmin):
    list_display = ("slug", "name", "created_at")
    filter_horizontal = ("studies",)
    search_fields = ("slug", "name")


@admin.register(Membership)
class MembershipAdmin(admin.ModelAdmin):
    list_display = ("user", "site", "role", "created_at")
    list_filter = ("role", "site")
    search_fields = ("user__username",)


@admin.register(ApiToken)
class ApiTokenAdmin(admin.ModelAdmin):
    list_display = ("name", "user", "lookup", "created_at", "last_used_at", "revoked_at")
    readonly_fields = ("lookup", "digest", "created_at", "last_used_at")


@admin.register(LoginFailure)
class LoginFailureAdmin(admin.ModelAdmin):
    list_display = ("username", "address", "at")
