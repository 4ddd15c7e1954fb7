"""Binary COPY payloads from numpy, read by PostgreSQL itself (the outside reference).

PostgreSQL's COPY FROM (FORMAT BINARY) parses the stream (PostgreSQL
documentation, "COPY — Binary Format"); the rows it stores are read back and
compared exactly with the arrays, for one NULL pattern (the usual file: rows
sliced in order) and for several (rows grouped by pattern), across chunk
boundaries.
"""

from __future__ import annotations

import numpy as np
import pytest
from django.db import connection

from lcstore.ingest.pgcopy import CopyColumn, binary_copy_chunks


def _round_trip(columns: list[CopyColumn], chunk_rows: int) -> list[tuple]:
    with connection.cursor() as cursor:
        cursor.execute(
            "CREATE TEMP TABLE copy_probe (k int8, x float8, flag bool, y float8, z int4)"
        )
        with cursor.cursor.copy("COPY copy_probe FROM STDIN (FORMAT BINARY)") as copy:
            for chunk in binary_copy_chunks(columns, chunk_rows=chunk_rows):
                copy.write(chunk)
        cursor.execute("SELECT k, x, flag, y, z FROM copy_probe ORDER BY k")
        rows = cursor.fetchall()
        cursor.execute("DROP TABLE copy_probe")
    return rows


@pytest.mark.django_db
@pytest.mark.parametrize("with_nulls", [False, True])
def test_binary_copy_round_trips_exactly(with_nulls: bool) -> None:
    rng = np.random.default_rng(3)
    n = 2503  # not a multiple of the chunk size
    k = np.arange(n, dtype=np.int64) * 7 - 1000
    x = rng.normal(size=n) * 10.0 ** rng.integers(-300, 300, n)  # float8 exactly
    flag = rng.random(n) < 0.5
    y = rng.normal(size=n)
    z = rng.integers(-(2**31), 2**31 - 1, n)
    y_null = rng.random(n) < 0.3 if with_nulls else None
    x_null = rng.random(n) < 0.1 if with_nulls else None
    columns = [
        CopyColumn("int8", k),
        CopyColumn("float8", x, x_null),
        CopyColumn("bool", flag),
        CopyColumn("float8", y, y_null),
        CopyColumn("int4", z),
    ]
    rows = _round_trip(columns, chunk_rows=500)
    assert [r[0] for r in rows] == k.tolist()
    for i, (_, gx, gflag, gy, gz) in enumerate(rows):
        assert gx == (None if x_null is not None and x_null[i] else x[i])
        assert gy == (None if y_null is not None and y_null[i] else y[i])
        assert gflag == bool(flag[i]) and gz == int(z[i])


def test_payload_checks() -> None:
    with pytest.raises(ValueError, match="same length"):
        list(binary_copy_chunks([CopyColumn("int8", np.zeros(2)), CopyColumn("int8", np.zeros(3))]))
    with pytest.raises(ValueError, match="unsupported"):
        list(binary_copy_chunks([CopyColumn("text", np.zeros(2))]))
