"""Data versions that key cached answers, so a cache can never serve a stale curve.

- a source's data version moves with every upload, retraction or supersession
  touching it (ids and instants of its uploads);
- the catalogue version moves with every curated change (the newest history id
  of the curated tables: django-simple-history writes a row on every save, from
  the admin, the API or a shell);
- while any upload of the source is under embargo, or is superseded by an
  upload under embargo (which may not cover this source: readers keep the old
  upload's points until the successor is visible, lcstore.queries), answers
  depend on who asks and on the clock, so they are not cached at all.

:func:`answer_version` reads both in one query (one round trip per request,
on the server the request reads from, see lcstore.dbrouter).
"""

from __future__ import annotations

import datetime as dt

from django.utils import timezone

from lcstore.dbrouter import read_connection
from lcstore.models import Band, CalibrationOffset, HostFlux, Instrument, Source, Upload

__all__ = ["answer_version", "catalogue_version", "source_data_version"]

_CURATED = (Source, Instrument, Band, CalibrationOffset, HostFlux)


def _stamp(d: dt.datetime | None) -> float:
    return d.timestamp() if d else 0


def _versions(source: Source | None) -> tuple[str | None, str]:
    """(data version of the source or None under embargo, catalogue version) in one query."""
    newest = ", ".join(
        f"(SELECT max(history_id) FROM {m.history.model._meta.db_table})"  # type: ignore[attr-defined]
        for m in _CURATED
    )
    through = Upload.sources.through._meta.db_table
    upload = Upload._meta.db_table
    sql = (
        f"SELECT {newest}, count(u.id), max(u.id), max(u.retracted_at), max(u.superseded_at), "
        "count(u.id) FILTER (WHERE u.embargo_until > %s OR EXISTS ("
        f"SELECT 1 FROM {upload} AS n WHERE n.supersedes_id = u.id AND n.embargo_until > %s)) "
        f"FROM {through} AS s JOIN {upload} AS u ON u.id = s.upload_id WHERE s.source_id = %s"
    )
    now = timezone.now()
    with read_connection().cursor() as cursor:
        cursor.execute(sql, [now, now, source.pk if source is not None else None])
        row = cursor.fetchone()
    k = len(_CURATED)
    catalogue = "-".join(str(v or 0) for v in row[:k])
    n, last, retracted, superseded, embargoed = row[k:]
    if embargoed:
        return None, catalogue
    return f"{n}.{last or 0}.{_stamp(retracted)}.{_stamp(superseded)}", catalogue


def catalogue_version() -> str:
    """The newest history id of each curated table, joined."""
    return _versions(None)[1]


def source_data_version(source: Source) -> str | None:
    """A string that changes whenever the source's stored data changes; None: do not cache."""
    return _versions(source)[0]


def answer_version(source: Source) -> str | None:
    """Data and catalogue version of an answer about ``source``; None: do not cache."""
    data, catalogue = _versions(source)
    return None if data is None else f"{data}|{catalogue}"
