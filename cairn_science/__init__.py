"""Cairn's science: BIDS checks, quality checks, signal preparation, features, learning and
release loading, with no Django, Celery or portal import (a test reads every import)."""
