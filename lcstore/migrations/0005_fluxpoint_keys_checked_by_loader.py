"""The point table's keys to source, band, instrument and upload lose their database constraint.

PostgreSQL checks a foreign key once per inserted row (a trigger queued for
commit); for a million-point upload the four checks took longer than the COPY
itself (lcbench: COPY into the point table 41 s, into the same table without
the constraints 7.6 s). The bulk loader (lcstore.ingest.load) checks and locks
the distinct ids of every load instead, and ``on_delete=PROTECT`` still refuses
deletes in the ORM (DEVELOPERS.md, "Point table integrity").
"""

import django.db.models.deletion
from django.db import migrations, models


def _key(to: str) -> models.ForeignKey:
    return models.ForeignKey(
        db_constraint=False,
        db_index=False,
        on_delete=django.db.models.deletion.PROTECT,
        to=to,
    )


class Migration(migrations.Migration):
    dependencies = [("lcstore", "0004_point_source_upload_statistics")]

    operations = [
        migrations.AlterField(model_name="fluxpoint", name="band", field=_key("lcstore.band")),
        migrations.AlterField(
            model_name="fluxpoint", name="instrument", field=_key("lcstore.instrument")
        ),
        migrations.AlterField(model_name="fluxpoint", name="source", field=_key("lcstore.source")),
        migrations.AlterField(model_name="fluxpoint", name="upload", field=_key("lcstore.upload")),
    ]
