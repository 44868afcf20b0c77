from django.apps import AppConfig


class DemoConfig(AppConfig):
    """The invented demo consortium and the bulk study: management commands and the
    generator behind them, no models and no pages."""

    name = "portal.demo"
    label = "demo"
    verbose_name = "Invented demo data"
