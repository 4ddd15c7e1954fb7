"""Selectors: everything that reads points. Keyword-only; answers are numpy arrays.

Visibility rules live here and nowhere else:
- ``as_of``: an upload counts at instant T if it was created by T and neither
  retracted nor superseded by T (nothing is deleted, so any past state is
  reachable);
- embargo: points of an upload whose ``embargo_until`` is in the future are
  seen only by its uploader and by curators.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from typing import Any

import numpy as np
from django.db import connection
from django.db.models import Q, QuerySet
from django.utils import timezone

from lcstore import roles
from lcstore.models import FluxPoint, Source, Upload

__all__ = [
    "PointArrays",
    "embargo_filter",
    "points_for_source",
    "uploads_visible",
    "upload_visible_to",
]


def embargo_filter(user: Any, now: dt.datetime | None = None) -> Q:
    """Uploads this user may see under the embargo rule (all of them for curators)."""
    now = now or timezone.now()
    open_q = Q(embargo_until__isnull=True) | Q(embargo_until__lte=now)
    if roles.is_curator(user):
        return Q()
    if getattr(user, "is_authenticated", False):
        return open_q | Q(uploader_id=user.pk)
    return open_q


def uploads_visible(
    *, user: Any, source: Source | None = None, as_of: dt.datetime | None = None
) -> QuerySet[Upload]:
    """Uploads whose points this user may see, in the store as it was at ``as_of``."""
    now = timezone.now()
    qs = Upload.objects.filter(embargo_filter(user, now))
    if source is not None:
        qs = qs.filter(sources=source)
    if as_of is None:
        qs = qs.filter(retracted_at__isnull=True, superseded_at__isnull=True)
    else:
        qs = (
            qs.filter(created_at__lte=as_of)
            .filter(Q(retracted_at__isnull=True) | Q(retracted_at__gt=as_of))
            .filter(Q(superseded_at__isnull=True) | Q(superseded_at__gt=as_of))
        )
    return qs


def upload_visible_to(upload: Upload, user: Any) -> bool:
    """Whether this user may see this upload's record, file and points (embargo rule)."""
    if upload.embargo_until is None or upload.embargo_until <= timezone.now():
        return True
    return roles.is_curator(user) or upload.uploader_id == getattr(user, "pk", None)


@dataclass
class PointArrays:
    """Points of one source as columns, sorted by (band, t)."""

    band_id: np.ndarray
    instrument_id: np.ndarray
    upload_id: np.ndarray
    t: np.ndarray
    value: np.ndarray
    error: np.ndarray
    upper_limit: np.ndarray

    def __len__(self) -> int:
        return len(self.t)

    def take(self, mask: np.ndarray) -> PointArrays:
        return PointArrays(**{k: getattr(self, k)[mask] for k in self.__dataclass_fields__})


_FETCH_DTYPE = np.dtype(
    [
        ("count", ">i2"),
        ("l0", ">i4"), ("band_id", ">i8"),
        ("l1", ">i4"), ("instrument_id", ">i8"),
        ("l2", ">i4"), ("upload_id", ">i8"),
        ("l3", ">i4"), ("t", ">f8"),
        ("l4", ">i4"), ("value", ">f8"),
        ("l5", ">i4"), ("error", ">f8"),
        ("l6", ">i4"), ("upper_limit", "?"),
    ]
)  # fmt: skip


def _fetch_postgresql(sql: str, params: list[Any]) -> np.ndarray:
    """Rows through ``COPY (SELECT …) TO STDOUT (FORMAT BINARY)`` straight into numpy.

    PERF-NOTES: a binary fetch is about twice as fast as a text cursor. Every
    column is NOT NULL in the SELECT (NULL errors come out as NaN), so each
    tuple has the same width and one structured dtype reads them all.
    """
    with connection.cursor() as cursor:
        inner = cursor.cursor.mogrify(sql, params)
        if isinstance(inner, bytes):
            inner = inner.decode()
        buf = bytearray()
        with cursor.cursor.copy(f"COPY ({inner}) TO STDOUT (FORMAT BINARY)") as copy:
            for block in copy:
                buf += block
    header = 11 + 4 + 4 + int.from_bytes(buf[15:19], "big")
    body = memoryview(buf)[header : len(buf) - 2]
    return np.frombuffer(body, dtype=_FETCH_DTYPE)


def points_for_source(
    *,
    source: Source,
    user: Any,
    band_ids: list[int] | None = None,
    instrument_ids: list[int] | None = None,
    start: float | None = None,
    end: float | None = None,
    as_of: dt.datetime | None = None,
) -> PointArrays:
    """The visible points of a source (canonical units, MJD TDB), sorted by band and time."""
    upload_ids = list(
        uploads_visible(user=user, source=source, as_of=as_of).values_list("pk", flat=True)
    )
    empty = PointArrays(
        *(np.zeros(0, dtype=d) for d in (np.int64, np.int64, np.int64, float, float, float, bool))
    )
    if not upload_ids:
        return empty
    table = FluxPoint._meta.db_table
    where = ["source_id = %s", "upload_id = ANY(%s)"]
    params: list[Any] = [source.pk, upload_ids]
    if band_ids is not None:
        where.append("band_id = ANY(%s)")
        params.append(list(band_ids))
    if instrument_ids is not None:
        where.append("instrument_id = ANY(%s)")
        params.append(list(instrument_ids))
    if start is not None:
        where.append("t >= %s")
        params.append(float(start))
    if end is not None:
        where.append("t <= %s")
        params.append(float(end))
    if connection.vendor == "postgresql":
        sql = (
            "SELECT band_id, instrument_id, upload_id, t, value, "
            "COALESCE(error, 'NaN'::float8), upper_limit "
            f"FROM {table} WHERE {' AND '.join(where)} ORDER BY band_id, t"
        )
        rec = _fetch_postgresql(sql, params)
        return PointArrays(
            band_id=rec["band_id"].astype(np.int64),
            instrument_id=rec["instrument_id"].astype(np.int64),
            upload_id=rec["upload_id"].astype(np.int64),
            t=rec["t"].astype(float),
            value=rec["value"].astype(float),
            error=rec["error"].astype(float),
            upper_limit=rec["upper_limit"].astype(bool),
        )
    qs = FluxPoint.objects.filter(source=source, upload_id__in=upload_ids)
    if band_ids is not None:
        qs = qs.filter(band_id__in=band_ids)
    if instrument_ids is not None:
        qs = qs.filter(instrument_id__in=instrument_ids)
    if start is not None:
        qs = qs.filter(t__gte=start)
    if end is not None:
        qs = qs.filter(t__lte=end)
    rows = list(
        qs.order_by("band_id", "t").values_list(
            "band_id", "instrument_id", "upload_id", "t", "value", "error", "upper_limit"
        )
    )
    if not rows:
        return empty
    cols = list(zip(*rows, strict=True))
    return PointArrays(
        band_id=np.array(cols[0], dtype=np.int64),
        instrument_id=np.array(cols[1], dtype=np.int64),
        upload_id=np.array(cols[2], dtype=np.int64),
        t=np.array(cols[3], dtype=float),
        value=np.array(cols[4], dtype=float),
        error=np.array([np.nan if e is None else e for e in cols[5]], dtype=float),
        upper_limit=np.array(cols[6], dtype=bool),
    )


def source_summaries(*, source_ids: list[int], user: Any) -> dict[int, list[dict[str, Any]]]:
    """Per source and band: number of points and limits and the time range, visible uploads only.

    One grouped query for any number of sources (list pages do not query per row).
    """
    from django.db.models import Count, Max, Min

    visible = uploads_visible(user=user).filter(sources__in=source_ids).values("pk")
    rows = (
        FluxPoint.objects.filter(source_id__in=source_ids, upload_id__in=visible)
        .values("source_id", "band__slug", "band__kind")
        .annotate(
            n=Count("id"),
            n_upper_limits=Count("id", filter=Q(upper_limit=True)),
            t_min=Min("t"),
            t_max=Max("t"),
        )
        .order_by("source_id", "band__slug")
    )
    out: dict[int, list[dict[str, Any]]] = {i: [] for i in source_ids}
    for r in rows:
        out[r["source_id"]].append(
            {
                "band": r["band__slug"],
                "kind": r["band__kind"],
                "n_points": r["n"],
                "n_upper_limits": r["n_upper_limits"],
                "time_min": r["t_min"],
                "time_max": r["t_max"],
            }
        )
    return out
