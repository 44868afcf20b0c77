"""Celery glue: load inputs, call a pure function from ``workers``, store outputs."""
