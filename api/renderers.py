"""Tabular renderings of computed answers: CSV (streamed), ECSV and VOTable via astropy.

The computed views build the body themselves (so large raw pulls can stream);
these renderer classes exist so DRF's ``format=``/``Accept`` negotiation knows
the formats, and they render error bodies as JSON text.
"""

from __future__ import annotations

import io
import json
from collections.abc import Iterable, Iterator
from typing import Any

import numpy as np
from astropy.table import Table
from rest_framework.renderers import BaseRenderer

__all__ = [
    "CSVRenderer",
    "ECSVRenderer",
    "PNGRenderer",
    "SVGRenderer",
    "VOTableRenderer",
    "csv_stream",
    "json_safe",
    "table_bytes",
]


class _TextRenderer(BaseRenderer):
    charset = "utf-8"

    def render(
        self,
        data: Any,
        accepted_media_type: str | None = None,
        renderer_context: dict | None = None,
    ) -> bytes:
        if isinstance(data, bytes):
            return data
        if isinstance(data, str):
            return data.encode()
        return json.dumps(data, default=str).encode()


class CSVRenderer(_TextRenderer):
    media_type = "text/csv"
    format = "csv"


class ECSVRenderer(_TextRenderer):
    media_type = "text/x-ecsv"
    format = "ecsv"


class VOTableRenderer(_TextRenderer):
    media_type = "application/x-votable+xml"
    format = "votable"


class PNGRenderer(_TextRenderer):
    media_type = "image/png"
    format = "png"
    charset = None


class SVGRenderer(_TextRenderer):
    media_type = "image/svg+xml"
    format = "svg"


def json_safe(a: np.ndarray) -> list:
    """A numpy column as a JSON list: NaN and inf become null."""
    if a.dtype.kind == "f":
        out = a.astype(object)
        out[~np.isfinite(a)] = None
        return out.tolist()
    return a.tolist()


def _format_column(a: np.ndarray) -> np.ndarray:
    if a.dtype.kind == "f":
        s = a.astype(str).astype(object)  # shortest round-trip repr (numpy's Dragon4)
        s[~np.isfinite(a)] = ""
        return s
    if a.dtype.kind == "b":
        return np.where(a, "true", "false").astype(object)
    return a.astype(str).astype(object)


def csv_stream(
    header: list[str], blocks: Iterable[dict[str, np.ndarray]], *, chunk_rows: int = 50_000
) -> Iterator[bytes]:
    """CSV text in pieces: the header, then rows built column-wise with numpy per chunk.

    Floats are written in their shortest form that reads back to the same float64;
    missing values are empty cells.
    """
    yield (",".join(header) + "\n").encode()
    for block in blocks:
        n = len(block[header[0]])
        for start in range(0, n, chunk_rows):
            cols = [
                _format_column(np.asarray(block[h][start : start + chunk_rows])) for h in header
            ]
            lines = cols[0]
            for c in cols[1:]:
                lines = lines + "," + c
            yield ("\n".join(lines.tolist()) + "\n").encode()


def table_bytes(table: Table, fmt: str) -> bytes:
    """ECSV or VOTable bytes of an astropy Table (units, descriptions, UCDs, meta kept)."""
    buf = io.BytesIO()
    if fmt == "ecsv":
        text = io.StringIO()
        table.write(text, format="ascii.ecsv")
        return text.getvalue().encode()
    table.write(buf, format="votable")
    return buf.getvalue()
