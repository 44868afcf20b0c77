# Jobs name their target by "app_label.model" (Job.target_type): jobs about a reproduction
# stored before the move say "audit.reproduction" and now say "lineage.reproduction", so the
# job pages and access rules find them. The content type row moves with the model, keeping
# permissions and admin history that point to it. Audit events keep the name they were
# written with (they are never changed).

from django.db import migrations

OLD, NEW = ("audit", "reproduction"), ("lineage", "reproduction")


def rename(apps, schema_editor, before, after):
    Job = apps.get_model("jobs", "Job")
    Job.objects.filter(target_type=".".join(before)).update(target_type=".".join(after))
    ContentType = apps.get_model("contenttypes", "ContentType")
    if not ContentType.objects.filter(app_label=after[0], model=after[1]).exists():
        ContentType.objects.filter(app_label=before[0], model=before[1]).update(
            app_label=after[0])


def forwards(apps, schema_editor):
    rename(apps, schema_editor, OLD, NEW)


def backwards(apps, schema_editor):
    rename(apps, schema_editor, NEW, OLD)


class Migration(migrations.Migration):

    dependencies = [
        ('lineage', '0001_initial'),
        ('audit', '0007_reproduction_moves_to_lineage'),
        ('jobs', '0002_job_transient_failures'),
        ('contenttypes', '0002_remove_content_type_name'),
    ]

    operations = [migrations.RunPython(forwards, backwards)]
