from django.apps import AppConfig


class DashboardConfig(AppConfig):
    name = "portal.dashboard"
    label = "dashboard"
    verbose_name = "Overview pages"
