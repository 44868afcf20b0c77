"""The embedded default's SQLite backend (see base.py)."""
