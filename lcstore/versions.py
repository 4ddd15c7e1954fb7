"""Data versions that key cached answers, so a cache can never serve a stale curve.

- a source's data version moves with every upload, retraction or supersession
  touching it (ids and instants of its uploads);
- the catalogue version moves with every curated change (the newest history id
  of the curated tables: django-simple-history writes a row on every save, from
  the admin, the API or a shell);
- while any upload of the source is under embargo, answers depend on who asks
  and on the clock, so they are not cached at all.
"""

from __future__ import annotations

from django.db.models import Count, Max, Q
from django.utils import timezone

from lcstore.models import Band, CalibrationOffset, HostFlux, Instrument, Source, Upload

__all__ = ["catalogue_version", "source_data_version"]


def catalogue_version() -> str:
    parts = []
    for model in (Source, Instrument, Band, CalibrationOffset, HostFlux):
        newest = model.history.aggregate(m=Max("history_id"))["m"]  # type: ignore[attr-defined]
        parts.append(str(newest or 0))
    return "-".join(parts)


def source_data_version(source: Source) -> str | None:
    """A string that changes whenever the source's stored data changes; None: do not cache."""
    agg = Upload.objects.filter(sources=source).aggregate(
        n=Count("id"),
        last=Max("id"),
        retracted=Max("retracted_at"),
        superseded=Max("superseded_at"),
        embargoed=Count("id", filter=Q(embargo_until__gt=timezone.now())),
    )
    if agg["embargoed"]:
        return None
    stamp = lambda d: d.timestamp() if d else 0  # noqa: E731
    return f"{agg['n']}.{agg['last'] or 0}.{stamp(agg['retracted'])}.{stamp(agg['superseded'])}"
