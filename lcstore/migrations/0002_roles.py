"""The two roles of DESIGN.md §4 as groups: contributors and curators."""

from django.db import migrations


def create_groups(apps, schema_editor):
    Group = apps.get_model("auth", "Group")
    for name in ("contributors", "curators"):
        Group.objects.get_or_create(name=name)


def remove_groups(apps, schema_editor):
    apps.get_model("auth", "Group").objects.filter(name__in=["contributors", "curators"]).delete()


class Migration(migrations.Migration):
    dependencies = [
        ("lcstore", "0001_initial"),
        ("auth", "0012_alter_user_first_name_max_length"),
    ]

    operations = [migrations.RunPython(create_groups, remove_groups)]
