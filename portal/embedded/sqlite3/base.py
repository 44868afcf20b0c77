"""Django's SQLite backend, which makes the database file's folder when it first connects
(settings only name the file)."""

from pathlib import Path

from django.db.backends.sqlite3 import base


class DatabaseWrapper(base.DatabaseWrapper):
    def get_new_connection(self, conn_params):
        name = str(conn_params.get("database", ""))
        if name and not self.creation.is_in_memory_db(name):
            Path(name).parent.mkdir(parents=True, exist_ok=True)
        return super().get_new_connection(conn_params)
