# Reproduction now belongs to the lineage app (lineage 0001 takes it over with its table,
# audit_reproduction, and its rows): remove it from the audit app's state only.

from django.db import migrations


class Migration(migrations.Migration):

    dependencies = [
        ('audit', '0006_reproduction'),
        ('lineage', '0001_initial'),
    ]

    operations = [
        migrations.SeparateDatabaseAndState(
            state_operations=[migrations.DeleteModel(name='Reproduction')],
            database_operations=[],
        ),
    ]
