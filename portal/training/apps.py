from django.apps import AppConfig


class TrainingConfig(AppConfig):
    name = "portal.training"
    verbose_name = "training runs and model releases"
