"""PostgreSQL binary COPY payloads built from numpy arrays, without a loop per row.

The binary COPY format (PostgreSQL documentation, "COPY — Binary Format"):
a signature ``PGCOPY\\n\\377\\r\\n\\0``, an int32 flags field and an int32
header-extension length, then per tuple an int16 field count and per field an
int32 byte length (−1 for NULL) followed by the value in network byte order;
an int16 −1 ends the stream.

A tuple's byte layout depends only on which of its fields are NULL, so rows
are grouped by their NULL pattern and each group is written through one
numpy structured dtype (PERF-NOTES: ~5 s per million rows on this machine,
on par with ``psql \\copy`` of a CSV file).
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass

import numpy as np

__all__ = ["CopyColumn", "SIGNATURE", "TRAILER", "binary_copy_chunks"]

SIGNATURE = b"PGCOPY\n\xff\r\n\x00" + (0).to_bytes(4, "big") + (0).to_bytes(4, "big")
TRAILER = (-1).to_bytes(2, "big", signed=True)

_WIRE = {"int8": ">i8", "float8": ">f8", "bool": "?", "int4": ">i4"}


@dataclass(frozen=True)
class CopyColumn:
    """One column: its PostgreSQL type name, values, and optional NULL mask."""

    pg_type: str
    values: np.ndarray
    null: np.ndarray | None = None


def _pattern_codes(columns: Sequence[CopyColumn], n: int) -> np.ndarray:
    code = np.zeros(n, dtype=np.int64)
    bit = 0
    for col in columns:
        if col.null is not None:
            code |= col.null.astype(np.int64) << bit
            bit += 1
    return code


def binary_copy_chunks(
    columns: Sequence[CopyColumn], *, chunk_rows: int = 100_000, framed: bool = True
) -> Iterator[bytes]:
    """Yield the binary COPY stream for the rows, in pieces of about ``chunk_rows`` rows.

    Row order is kept within each NULL pattern; patterns follow one another
    in order of first appearance. ``framed=False`` leaves out the signature and
    the trailer, for one stream written in several parts (send :data:`SIGNATURE`
    before the first and :data:`TRAILER` after the last).
    """
    n = len(columns[0].values) if columns else 0
    for col in columns:
        if len(col.values) != n:
            raise ValueError("all COPY columns must have the same length")
        if col.pg_type not in _WIRE:
            raise ValueError(f"unsupported COPY type {col.pg_type!r}")
    if framed:
        yield SIGNATURE
    if n:
        codes = _pattern_codes(columns, n)
        if codes.min() == codes.max():  # one NULL pattern (the usual file): rows in order
            yield from _pattern_chunks(columns, np.arange(n), chunk_rows)
        else:
            uniq, first = np.unique(codes, return_index=True)
            for code in uniq[np.argsort(first)]:
                rows = np.flatnonzero(codes == code)
                yield from _pattern_chunks(columns, rows, chunk_rows)
    if framed:
        yield TRAILER


def _pattern_chunks(
    columns: Sequence[CopyColumn], rows: np.ndarray, chunk_rows: int
) -> Iterator[bytes]:
    row0 = rows[0]
    fields: list[tuple[str, str]] = [("count", ">i2")]
    present: list[tuple[int, CopyColumn]] = []
    for i, col in enumerate(columns):
        fields.append((f"len{i}", ">i4"))
        if col.null is None or not col.null[row0]:
            fields.append((f"v{i}", _WIRE[col.pg_type]))
            present.append((i, col))
    dtype = np.dtype(fields)
    lengths = {i: np.dtype(_WIRE[c.pg_type]).itemsize for i, c in enumerate(columns)}
    # Consecutive rows (a whole column, or one run of a pattern) are sliced, not gathered.
    contiguous = len(rows) > 0 and int(rows[-1]) - int(rows[0]) == len(rows) - 1
    present_ids = {i for i, _ in present}
    for start in range(0, len(rows), chunk_rows):
        idx = rows[start : start + chunk_rows]
        take: slice | np.ndarray = slice(int(idx[0]), int(idx[-1]) + 1) if contiguous else idx
        rec = np.empty(len(idx), dtype=dtype)
        rec["count"] = len(columns)
        for i in range(len(columns)):
            rec[f"len{i}"] = lengths[i] if i in present_ids else -1
        for i, col in present:
            rec[f"v{i}"] = col.values[take]
        yield rec.tobytes()
