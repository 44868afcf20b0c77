"""On PostgreSQL, refuse UPDATE, DELETE and TRUNCATE of audit events in the database itself."""

from django.db import migrations

FORWARD = """
CREATE OR REPLACE FUNCTION audit_event_refuse_change() RETURNS trigger AS $$
BEGIN
  RAISE EXCEPTION 'audit events are append-only: % refused', TG_OP;
END;
$$ LANGUAGE plpgsql;
CREATE TRIGGER audit_event_no_update BEFORE UPDATE OR DELETE ON audit_event
  FOR EACH ROW EXECUTE FUNCTION audit_event_refuse_change();
CREATE TRIGGER audit_event_no_truncate BEFORE TRUNCATE ON audit_event
  FOR EACH STATEMENT EXECUTE FUNCTION audit_event_refuse_change();
"""

BACKWARD = """
DROP TRIGGER IF EXISTS audit_event_no_update ON audit_event;
DROP TRIGGER IF EXISTS audit_event_no_truncate ON audit_event;
DROP FUNCTION IF EXISTS audit_event_refuse_change();
"""


def forward(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(FORWARD, params=None)


def backward(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(BACKWARD, params=None)


class Migration(migrations.Migration):
    dependencies = [("audit", "0001_initial")]
    operations = [migrations.RunPython(forward, backward)]
