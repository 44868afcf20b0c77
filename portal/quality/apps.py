from django.apps import AppConfig


class QualityConfig(AppConfig):
    name = "portal.quality"
    label = "quality"
    verbose_name = "Quality checks"
