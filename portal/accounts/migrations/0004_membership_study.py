"""Roles are held per (site, study).

Before this migration a role at a site counted in every study the site took part in. Each
existing membership is kept for ONE study only: the site's first study (lowest id), which is
the study the site was created for by ``add_site``. A person who also needs the role in the
site's other studies must be given it again with ``manage.py add_member … --study SLUG``;
the migration prints which memberships that concerns. Memberships at a site that takes part
in no study granted nothing of any study and are removed.
"""

from django.db import migrations, models
import django.db.models.deletion


def assign_first_study(apps, schema_editor):
    Membership = apps.get_model("accounts", "Membership")
    Site = apps.get_model("accounts", "Site")
    first = {}
    several = set()
    for site in Site.objects.all():
        ids = sorted(site.studies.values_list("pk", flat=True))
        if ids:
            first[site.pk] = ids[0]
        if len(ids) > 1:
            several.add(site.pk)
    for membership in Membership.objects.all():
        study_id = first.get(membership.site_id)
        if study_id is None:
            membership.delete()
            continue
        membership.study_id = study_id
        membership.save(update_fields=["study"])
        if membership.site_id in several:
            print(f"\n  membership {membership.pk} (user {membership.user_id}, role "
                  f"{membership.role}) now counts in study {study_id} only; give it again "
                  "with add_member --study for the site's other studies")


class Migration(migrations.Migration):

    dependencies = [
        ('accounts', '0003_time_zone'),
    ]

    operations = [
        migrations.RemoveConstraint(
            model_name='membership',
            name='one_role_once_per_site',
        ),
        migrations.AddField(
            model_name='membership',
            name='study',
            field=models.ForeignKey(null=True, on_delete=django.db.models.deletion.CASCADE,
                                    related_name='memberships', to='accounts.study'),
        ),
        migrations.RunPython(assign_first_study, migrations.RunPython.noop),
        migrations.AlterField(
            model_name='membership',
            name='study',
            field=models.ForeignKey(on_delete=django.db.models.deletion.CASCADE,
                                    related_name='memberships', to='accounts.study'),
        ),
        migrations.AlterModelOptions(
            name='membership',
            options={'ordering': ['study__slug', 'site__slug', 'user__username']},
        ),
        migrations.AddConstraint(
            model_name='membership',
            constraint=models.UniqueConstraint(fields=('user', 'site', 'study', 'role'),
                                               name='one_role_once_per_site_and_study'),
        ),
    ]
