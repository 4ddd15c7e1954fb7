"""Extended statistics on the point table: an upload's points belong to its source.

Point selectors filter by ``source_id = s AND upload_id = ANY(visible uploads)``.
Without these statistics PostgreSQL multiplies the two selectivities as if
independent and expects ~1% of the source's rows; with 100 other sources in the
table it then picks a bitmap scan of (source, upload) and a sort that spills,
instead of the ordered scan of the covering (source, band, t) index (EXPLAIN
ANALYZE on the lcbench isolation table: rows=1047 estimated, 100,000 found).
``dependencies`` tells the planner that upload determines source. PostgreSQL
only: the embedded SQLite demo has no such statement and needs none.
"""

from django.db import migrations

TABLE = "lcstore_fluxpoint"
NAME = "point_source_upload_stats"


def create(apps, schema_editor):  # noqa: ANN001, ARG001
    if schema_editor.connection.vendor != "postgresql":
        return
    schema_editor.execute(
        f"CREATE STATISTICS IF NOT EXISTS {NAME} (dependencies, ndistinct) "
        f"ON source_id, upload_id FROM {TABLE}"
    )
    schema_editor.execute(f"ANALYZE {TABLE}")


def drop(apps, schema_editor):  # noqa: ANN001, ARG001
    if schema_editor.connection.vendor != "postgresql":
        return
    schema_editor.execute(f"DROP STATISTICS IF EXISTS {NAME}")


class Migration(migrations.Migration):
    dependencies = [("lcstore", "0003_jobs")]

    operations = [migrations.RunPython(create, drop, elidable=False)]
