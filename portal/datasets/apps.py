from django.apps import AppConfig


class DatasetsConfig(AppConfig):
    name = "portal.datasets"
    label = "datasets"
    verbose_name = "Uploads and dataset versions"
