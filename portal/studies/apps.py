from django.apps import AppConfig


class StudiesConfig(AppConfig):
    name = "portal.studies"
    label = "studies"
    verbose_name = "Study protocols"
