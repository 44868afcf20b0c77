from django.apps import AppConfig


class LineageConfig(AppConfig):
    name = "portal.lineage"
    label = "lineage"
    verbose_name = "Lineage and reproduction"
