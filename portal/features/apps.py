from django.apps import AppConfig


class FeaturesConfig(AppConfig):
    name = "portal.features"
    verbose_name = "feature sets"
