"""Cairn's computation: pure scientific modules plus the Celery glue in ``workers.tasks``."""
