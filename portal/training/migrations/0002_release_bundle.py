from django.db import migrations, models


def fill(apps, schema_editor):
    """An archive for each release stored before releases had one, from its stored files
    (the requirements are those installed when the migration runs)."""
    from portal.datasets import blobs
    from cairn_science.release import bundle, release_requirements

    ModelRelease = apps.get_model("training", "ModelRelease")
    requirements = None
    for release in ModelRelease.objects.filter(bundle_sha256="").iterator(chunk_size=100):
        requirements = requirements or release_requirements()
        files = {}
        for name, sha in (("model.skops", release.model_sha256),
                          ("model-card.md", release.card_sha256),
                          ("features.json", release.spec_sha256)):
            with blobs.open_blob(sha) as fh:
                files[name] = fh.read()
        sha, _ = blobs.put_bytes(bundle(files, requirements=requirements))
        ModelRelease.objects.filter(pk=release.pk).update(bundle_sha256=sha)


class Migration(migrations.Migration):

    dependencies = [
        ("training", "0001_initial"),
    ]

    operations = [
        migrations.AddField(
            model_name="modelrelease",
            name="bundle_sha256",
            field=models.CharField(default="", max_length=64),
            preserve_default=False,
        ),
        migrations.RunPython(fill, migrations.RunPython.noop),
    ]
