"""Curated metadata changes and the re-derivation of the points that depend on them.

A stored point's canonical value and BJD_TDB time were computed from the kept
original file with the curated metadata valid at upload time (band zero point,
wavelength, energy range, photon index, count factor; instrument site, MET
epoch, default time system; source position). When a curator changes one of
those, every accepted upload whose points it enters is read again from its
kept bytes and converted with the new metadata, in the same transaction as the
change. The result is a new upload that supersedes the old one, so no point is
overwritten: ``as_of`` before the change answers with the old points (old
metadata), after it with the new. The history of each curated record (who,
when, before, after) is kept by django-simple-history; the new upload's
provenance names the history version it was derived from.
"""

from __future__ import annotations

import datetime as dt
import operator
from collections.abc import Iterable
from functools import reduce
from typing import Any

import numpy as np
from django.core.exceptions import ValidationError
from django.db import models, transaction
from django.db.models import Exists, OuterRef, Q, QuerySet
from django.utils import timezone

from lcstore import models as models_
from lcstore.ingest.pipeline import PreparedPoints, UploadInvalid
from lcstore.models import Band, FluxPoint, Instrument, Source, Upload, UploadStatus
from lcstore.services import (
    UploadParams,
    checksum_lock,
    upload_prepare,
    upload_read,
    upload_store,
)

__all__ = [
    "BAND_CONVERSION_FIELDS",
    "INSTRUMENT_CONVERSION_FIELDS",
    "SOURCE_CONVERSION_FIELDS",
    "RederivationRefused",
    "affected_uploads",
    "curated_change_apply",
    "uploads_rederive",
]

BAND_CONVERSION_FIELDS = frozenset(models_.BAND_CONVERSION_FIELDS)
_SITE_FIELDS = frozenset({"site_lon", "site_lat", "site_height", "kind"})
_TIME_DEFAULT_FIELDS = frozenset(
    {"default_time_format", "default_time_scale", "default_time_reference"}
)
INSTRUMENT_CONVERSION_FIELDS = frozenset(models_.INSTRUMENT_CONVERSION_FIELDS)
SOURCE_CONVERSION_FIELDS = frozenset(models_.SOURCE_CONVERSION_FIELDS)
assert _SITE_FIELDS | _TIME_DEFAULT_FIELDS | {"met_epoch"} == INSTRUMENT_CONVERSION_FIELDS

# model -> (keyword of affected_uploads, key in the metadata snapshot, conversion fields)
_CURATED: dict[type[models.Model], tuple[str, str, frozenset[str]]] = {
    Band: ("band", "bands", BAND_CONVERSION_FIELDS),
    Instrument: ("instrument", "instrument", INSTRUMENT_CONVERSION_FIELDS),
    Source: ("source", "sources", SOURCE_CONVERSION_FIELDS),
}

# The ``parameters["time"]["from"]`` values of services.upload_store (TimeSettings.origin).
_FROM_INSTRUMENT = "instrument defaults"
_FROM_FITS_ONLY = "FITS time keywords (Rots et al. 2015)"


class RederivationRefused(ValidationError):
    """Some dependent upload cannot be converted with the new metadata; nothing was changed."""

    def __init__(self, failures: list[tuple[int, UploadInvalid]]):
        self.upload_ids = [pk for pk, _ in failures]
        shown = "; ".join(
            f"upload {pk}: {exc.problems[0].message if exc.problems else exc}"
            for pk, exc in failures[:10]
        )
        more = f"; and {len(failures) - 10} more" if len(failures) > 10 else ""
        ids = ", ".join(str(pk) for pk in self.upload_ids)
        super().__init__(
            f"the change was refused and nothing was changed: the kept files of upload(s) "
            f"{ids} cannot be converted with the new metadata ({shown}{more})",
            code="rederivation_failed",
        )


def _uses_instrument_met_epoch(upload: Upload) -> bool:
    """Whether the upload's MET times were counted from the instrument's curated epoch."""
    origin = upload.parameters.get("time", {}).get("from", "")
    if upload.time_format != "met" or origin.startswith("FITS"):
        return False
    if origin == _FROM_INSTRUMENT:
        return True
    # Explicit time parameters without met_epoch: the epoch came from the instrument, and
    # the snapshot of the instrument taken at upload time says which value that was.
    snap = upload.parameters.get("metadata", {}).get("instrument", {})
    epochs = [rec.get("met_epoch") for rec in snap.values()]
    return bool(epochs) and epochs[0] is not None and epochs[0] == upload.met_epoch


def affected_uploads(
    *,
    band: Band | None = None,
    instrument: Instrument | None = None,
    source: Source | None = None,
    changed: set[str] | frozenset[str],
) -> QuerySet[Upload]:
    """Accepted uploads whose conversion used the ``changed`` fields of one curated record.

    - band: every upload with points in the band, for any of
      :data:`BAND_CONVERSION_FIELDS`;
    - instrument: site and kind enter topocentric times only; the default time
      format/scale/reference only uploads whose time system came from the instrument
      defaults (``parameters["time"]["from"]``); ``met_epoch`` only MET uploads that
      counted from the instrument's epoch;
    - source: ra/dec enter every light-time correction (not times already barycentric).

    This is the candidate set by rule; :func:`uploads_rederive` supersedes only those
    whose recomputed points differ (e.g. a zero point does not enter an upload in mJy).
    """
    given = [x for x in (band, instrument, source) if x is not None]
    if len(given) != 1:
        raise TypeError("name exactly one of band, instrument or source")
    qs = Upload.objects.filter(status=UploadStatus.ACCEPTED)
    if band is not None:
        if not changed & BAND_CONVERSION_FIELDS:
            return qs.none()
        # Points of the band in this upload, looked up by source first (the index order).
        in_band = FluxPoint.objects.filter(
            source_id__in=Upload.sources.through.objects.filter(
                upload_id=OuterRef(OuterRef("pk"))
            ).values("source_id"),
            band=band,
            upload_id=OuterRef("pk"),
        )
        return qs.filter(Q(band=band) | (Q(band__isnull=True) & Exists(in_band)))
    if source is not None:
        if not changed & SOURCE_CONVERSION_FIELDS:
            return qs.none()
        return qs.filter(sources=source).exclude(time_reference="BARYCENTER")
    assert instrument is not None
    qs = qs.filter(instrument=instrument)
    conditions: list[Q] = []
    if changed & _SITE_FIELDS:
        conditions.append(Q(time_reference="TOPOCENTER"))
    if changed & _TIME_DEFAULT_FIELDS:
        conditions.append(Q(parameters__time__from=_FROM_INSTRUMENT))
    if "met_epoch" in changed:
        ids = [u.pk for u in qs.filter(time_format="met") if _uses_instrument_met_epoch(u)]
        conditions.append(Q(pk__in=ids))
    if not conditions:
        return qs.none()
    return qs.filter(reduce(operator.or_, conditions))


def _params_of(upload: Upload) -> UploadParams:
    """The upload's parameters as used, for the same conversion with today's metadata.

    What came from the instrument stays unset, so the instrument's current values
    apply; what the contributor gave (or the file said) is pinned as resolved.
    """
    origin = upload.parameters.get("time", {}).get("from", "")
    if origin in (_FROM_INSTRUMENT, _FROM_FITS_ONLY):
        time: dict[str, Any] = {}
    else:
        time = {
            "time_format": upload.time_format,
            "time_scale": upload.time_scale,
            "time_reference": upload.time_reference,
            "met_epoch": None if _uses_instrument_met_epoch(upload) else upload.met_epoch,
        }
    return UploadParams(
        instrument=upload.instrument.slug,
        source=upload.source.slug if upload.source else None,
        band=upload.band.slug if upload.band else None,
        format=upload.format,
        columns=dict(upload.columns),
        value_unit=upload.value_unit or None,
        reduction=upload.reduction,
        reference=upload.reference,
        embargo_until=upload.embargo_until,
        supersedes=upload.pk,
        **time,
    )


_COMPARED = (
    "source_id",
    "band_id",
    "t",
    "value",
    "error",
    "upper_limit",
    "time_error",
    "time_orig",
    "value_orig",
    "error_orig",
)


def _same_points(upload: Upload, prepared: PreparedPoints) -> bool:
    """Whether the stored points of ``upload`` equal ``prepared`` exactly (NULL = NaN)."""
    if upload.n_points != len(prepared):
        return False
    rows = list(
        FluxPoint.objects.filter(source_id__in=upload.sources.values("pk"), upload_id=upload.pk)
        .order_by("source_id", "band_id", "t", "id")
        .values_list(*_COMPARED)
    )
    if len(rows) != len(prepared):
        return False
    stored = list(zip(*rows, strict=True)) if rows else [() for _ in _COMPARED]
    for name, column in zip(_COMPARED, stored, strict=True):
        mine = getattr(prepared, name)
        if name in ("source_id", "band_id", "upper_limit"):
            if not np.array_equal(np.asarray(column, dtype=mine.dtype), mine):
                return False
            continue
        theirs = np.array([np.nan if v is None else v for v in column], dtype=float)
        if not np.array_equal(theirs, np.asarray(mine, dtype=float), equal_nan=True):
            return False
    return True


def uploads_rederive(
    *,
    uploads: Iterable[Upload],
    user: Any,
    reason: str,
    history: dict[str, Any] | None = None,
    at: dt.datetime | None = None,
) -> list[Upload]:
    """Convert the uploads' kept files again with today's metadata; return the new uploads.

    Each accepted upload whose recomputed points differ from its stored ones is
    superseded (at instant ``at``, default now) by a new upload with the same file,
    uploader, parameters, embargo, reduction and reference; its parameters gain
    ``rederived`` (reason, the upload it replaces, who, and the metadata ``history``
    versions that caused it). Uploads whose points come out identical are left alone.
    All or nothing: if any file cannot be converted, :class:`RederivationRefused`
    names every such upload and nothing is stored.
    """
    now = at or timezone.now()
    by = getattr(user, "username", None) or "system"
    created: list[Upload] = []
    failures: list[tuple[int, UploadInvalid]] = []
    with transaction.atomic():
        for pk in sorted({u.pk for u in uploads}):
            old = (
                Upload.objects.select_for_update(of=("self",))
                .select_related("instrument", "band", "source", "file", "uploader")
                .get(pk=pk)
            )
            if old.status != UploadStatus.ACCEPTED:
                continue
            data = old.file.original()
            params = _params_of(old)
            try:
                raw = upload_read(data=data, file_name=old.file_name, format=old.format)
                instrument, prepared = upload_prepare(raw=raw, params=params)
            except UploadInvalid as exc:
                failures.append((old.pk, exc))
                continue
            if failures or _same_points(old, prepared):
                continue
            checksum_lock(old.file_id)
            created.append(
                upload_store(
                    uploader=old.uploader,
                    data=data,
                    sha256=old.file_id,
                    file_name=old.file_name,
                    raw=raw,
                    instrument=instrument,
                    prepared=prepared,
                    params=params,
                    supersedes=old,
                    now=now,
                    extra_parameters={
                        "rederived": {
                            "reason": reason,
                            "from_upload": old.pk,
                            "by": by,
                            "at": now.isoformat(),
                            "history": history or {},
                        }
                    },
                )
            )
        if failures:
            raise RederivationRefused(failures)
    return created


def _show(value: Any) -> str:
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return "none" if value is None or value == "" else str(value)


def curated_change_apply(
    *, instance: models.Model, changes: dict[str, Any], user: Any
) -> tuple[models.Model, list[Upload]]:
    """Save a change to a source, instrument or band and re-derive what depends on it.

    One transaction: the record is validated (``full_clean``) and saved with its
    history entry (``history_user`` = ``user``, ``history_date`` = the instant the
    new uploads take effect), then :func:`uploads_rederive` runs on
    :func:`affected_uploads`. If any of those cannot be converted, the whole change
    is refused (:class:`RederivationRefused`) and nothing is stored. Returns the
    saved record and the new uploads (empty when no conversion field changed).
    """
    model = type(instance)
    if model not in _CURATED:
        raise TypeError(f"{model.__name__} is not a curated record that enters conversions")
    keyword, snapshot_key, fields = _CURATED[model]
    with transaction.atomic():
        obj = model._default_manager.select_for_update().get(pk=instance.pk)
        before = {f: getattr(obj, f) for f in changes}
        for f, v in changes.items():
            setattr(obj, f, v)
        obj.full_clean()
        changed = {f for f in changes if getattr(obj, f) != before[f]}
        if not changed:
            return obj, []
        now = timezone.now()
        obj._history_user = user  # type: ignore[attr-defined]
        obj._history_date = now  # type: ignore[attr-defined]
        obj.save()
        del obj._history_user, obj._history_date  # type: ignore[attr-defined]
        relevant = changed & fields
        if not relevant:
            return obj, []
        versions = obj.history.order_by("-history_id")  # type: ignore[attr-defined]
        record = versions.first()
        previous = versions.filter(history_id__lt=record.history_id).first()
        slug = obj.slug  # type: ignore[attr-defined]
        reason = (
            f"{keyword} {slug} "
            + ", ".join(
                f"{f} {_show(before[f])} -> {_show(getattr(obj, f))}" for f in sorted(relevant)
            )
            + f" by {getattr(user, 'username', None) or 'system'}"
        )
        history = {
            snapshot_key: {
                slug: {
                    "history_id": record.history_id,
                    "previous_history_id": previous.history_id if previous else None,
                    "changed": sorted(relevant),
                }
            }
        }
        new = uploads_rederive(
            uploads=affected_uploads(**{keyword: obj}, changed=relevant),
            user=user,
            reason=reason,
            history=history,
            at=now,
        )
    return obj, new
