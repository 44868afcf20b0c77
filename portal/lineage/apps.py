from django.apps import AppConfig


class LineageConfig(AppConfig):
    name = "portal.lineage"
    label = "lineage"
    verbose_name = "Lineage and reproduction"

    def ready(self):
        from portal.lineage.links import register_all

        register_all()  # the audit trail's links to object pages
