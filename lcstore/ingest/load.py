"""Bulk load of prepared points: binary COPY on PostgreSQL, batched INSERT elsewhere.

This is one of the two places where database backends differ (the other is
the binning selector); nothing else in lcstore knows which backend it runs on.
"""

from __future__ import annotations

import numpy as np
from django.db import connection

from lcstore.ingest.pgcopy import CopyColumn, binary_copy_chunks
from lcstore.ingest.pipeline import PreparedPoints
from lcstore.models import FluxPoint

__all__ = ["points_load"]

_COLUMNS = (
    "source_id",
    "band_id",
    "instrument_id",
    "upload_id",
    "t",
    "value",
    "error",
    "upper_limit",
    "time_error",
    "time_orig",
    "value_orig",
    "error_orig",
)


def _copy_columns(
    points: PreparedPoints, *, instrument_id: int, upload_id: int
) -> list[CopyColumn]:
    n = len(points)

    def nullable(a: np.ndarray) -> CopyColumn:
        return CopyColumn("float8", a, ~np.isfinite(a))

    return [
        CopyColumn("int8", points.source_id),
        CopyColumn("int8", points.band_id),
        CopyColumn("int8", np.full(n, instrument_id, dtype=np.int64)),
        CopyColumn("int8", np.full(n, upload_id, dtype=np.int64)),
        CopyColumn("float8", points.t),
        CopyColumn("float8", points.value),
        nullable(points.error),
        CopyColumn("bool", points.upper_limit),
        nullable(points.time_error),
        CopyColumn("float8", points.time_orig),
        CopyColumn("float8", points.value_orig),
        nullable(points.error_orig),
    ]


def points_load(points: PreparedPoints, *, instrument_id: int, upload_id: int) -> int:
    """Insert the points of one upload inside the caller's transaction; return the count."""
    table = FluxPoint._meta.db_table
    cols = _copy_columns(points, instrument_id=instrument_id, upload_id=upload_id)
    if connection.vendor == "postgresql":
        sql = f"COPY {table} ({', '.join(_COLUMNS)}) FROM STDIN (FORMAT BINARY)"
        with connection.cursor() as cursor:
            with cursor.cursor.copy(sql) as copy:
                for chunk in binary_copy_chunks(cols):
                    copy.write(chunk)
        return len(points)
    # Embedded demo database: plain batched INSERTs.
    placeholders = ", ".join(["%s"] * len(_COLUMNS))
    sql = f"INSERT INTO {table} ({', '.join(_COLUMNS)}) VALUES ({placeholders})"
    arrays = []
    for c in cols:
        vals = c.values.astype(object)
        if c.pg_type == "float8":
            vals = c.values.astype(float).astype(object)
        if c.null is not None:
            vals[c.null] = None
        arrays.append(vals)
    rows = list(zip(*arrays, strict=True))
    with connection.cursor() as cursor:
        for start in range(0, len(rows), 5000):
            cursor.executemany(sql, rows[start : start + 5000])
    return len(points)
