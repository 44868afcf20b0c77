from django.apps import AppConfig


class JobsConfig(AppConfig):
    name = "portal.jobs"
    label = "jobs"
    verbose_name = "Background jobs"
