"""The chain's links are append-only in the database too (PostgreSQL), and its head row
exists from the start so that sealers only ever lock it, never race to create it."""

from django.db import migrations

FORWARD = """
CREATE TRIGGER audit_chainlink_no_update BEFORE UPDATE OR DELETE ON audit_chainlink
  FOR EACH ROW EXECUTE FUNCTION audit_event_refuse_change();
CREATE TRIGGER audit_chainlink_no_truncate BEFORE TRUNCATE ON audit_chainlink
  FOR EACH STATEMENT EXECUTE FUNCTION audit_event_refuse_change();
"""

BACKWARD = """
DROP TRIGGER IF EXISTS audit_chainlink_no_update ON audit_chainlink;
DROP TRIGGER IF EXISTS audit_chainlink_no_truncate ON audit_chainlink;
"""


def forward(apps, schema_editor):
    apps.get_model("audit", "ChainHead").objects.get_or_create(pk=1)
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(FORWARD, params=None)


def backward(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(BACKWARD, params=None)


class Migration(migrations.Migration):
    dependencies = [("audit", "0003_chainhead_chainlink")]
    operations = [migrations.RunPython(forward, backward)]
