# Reproduction moves here from the audit app with its table (audit_reproduction) and rows:
# this migration only adds the model to Django's state; audit 0007 removes it from audit's.

import django.db.models.deletion
import django.utils.timezone
from django.conf import settings
from django.db import migrations, models


class Migration(migrations.Migration):

    initial = True

    dependencies = [
        ('audit', '0006_reproduction'),  # the table is created there
        migrations.swappable_dependency(settings.AUTH_USER_MODEL),
    ]

    operations = [
        migrations.SeparateDatabaseAndState(
            state_operations=[
                migrations.CreateModel(
                    name='Reproduction',
                    fields=[
                        ('id', models.BigAutoField(auto_created=True, primary_key=True, serialize=False, verbose_name='ID')),
                        ('subject', models.CharField(db_index=True, max_length=40)),
                        ('original_sha256', models.CharField(max_length=64)),
                        ('new_sha256', models.CharField(blank=True, max_length=64)),
                        ('matches', models.BooleanField(null=True)),
                        ('details', models.JSONField(blank=True, default=dict)),
                        ('error', models.TextField(blank=True)),
                        ('created_at', models.DateTimeField(default=django.utils.timezone.now)),
                        ('finished_at', models.DateTimeField(blank=True, null=True)),
                        ('created_by', models.ForeignKey(blank=True, null=True, on_delete=django.db.models.deletion.SET_NULL, related_name='+', to=settings.AUTH_USER_MODEL)),
                    ],
                    options={
                        'db_table': 'audit_reproduction',
                        'ordering': ['-created_at', '-id'],
                    },
                ),
            ],
            database_operations=[],
        ),
    ]
