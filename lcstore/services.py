"""Services: everything that writes to the store. Keyword-only, one transaction each."""

from __future__ import annotations

import datetime as dt
import hashlib
import itertools
import zlib
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

import numpy as np
from django.db import connection, transaction
from django.db.models import Max
from django.utils import timezone

from lcstore import roles, timing
from lcstore.ingest.load import points_load, points_stream, stored_file_save
from lcstore.ingest.pipeline import (
    BandRecord,
    InstrumentRecord,
    PreparedPoints,
    SourceRecord,
    UploadInvalid,
    prepare_points,
)
from lcstore.ingest.readers import (
    FileProblem,
    RawTable,
    ReadError,
    read_upload,
    read_upload_chunks,
)
from lcstore.models import (
    BAND_CONVERSION_FIELDS,
    INSTRUMENT_CONVERSION_FIELDS,
    SOURCE_CONVERSION_FIELDS,
    Band,
    Instrument,
    Source,
    StoredFile,
    Upload,
    UploadStatus,
)
from lcstore.queries import upload_visible_to

__all__ = [
    "UploadConflict",
    "UploadForbidden",
    "UploadInvalid",
    "UploadParams",
    "checksum_lock",
    "upload_create",
    "upload_prepare",
    "upload_read",
    "upload_retract",
    "upload_store",
]


class UploadConflict(Exception):
    """The same bytes were already accepted for the same source."""

    def __init__(self, existing: Upload, source_slugs: list[str], *, visible: bool = True):
        self.existing = existing
        self.source_slugs = source_slugs
        # An embargoed upload of someone else is not named (its id would leak it).
        self.visible = visible
        named = f" as upload {existing.pk}" if visible else ""
        super().__init__(
            f"this file (sha256 {existing.file_id}) was already accepted for "
            f"{', '.join(source_slugs)}{named}"
        )


class UploadForbidden(Exception):
    """The account may not do this to that upload."""


@dataclass(frozen=True)
class UploadParams:
    """What a contributor says about a file (DESIGN.md §4, Upload)."""

    instrument: str
    source: str | None = None
    band: str | None = None
    format: str | None = None
    columns: dict[str, str] | None = None
    value_unit: str | None = None
    time_format: str | None = None
    time_scale: str | None = None
    time_reference: str | None = None
    met_epoch: float | None = None
    reduction: str = ""
    reference: str = ""
    embargo_until: dt.datetime | None = None
    supersedes: int | None = None


def _problem(message: str, column: str | None = None) -> UploadInvalid:
    return UploadInvalid([FileProblem(row=None, column=column, message=message)])


# The curated fields that enter a conversion, recorded in ``parameters["metadata"]``
# (lcstore/rederive.py lists which uploads each of them enters).
_SNAPSHOT_FIELDS: dict[str, tuple[Any, tuple[str, ...]]] = {
    "instrument": (Instrument, INSTRUMENT_CONVERSION_FIELDS),
    "sources": (Source, SOURCE_CONVERSION_FIELDS),
    "bands": (Band, BAND_CONVERSION_FIELDS),
}


def _share_lock(qs: Any) -> None:
    """``SELECT … FOR SHARE`` on the rows of ``qs`` until the transaction ends.

    A curated change takes its record ``FOR UPDATE`` (``curated_change_apply``), so it
    waits for the upload holding the share lock, and then finds that upload among the
    ones to re-derive; concurrent uploads do not wait for each other.
    """
    if connection.vendor != "postgresql":
        return  # the embedded SQLite demo has one writer at a time
    sql, params = qs.order_by("pk").values("pk").query.sql_with_params()
    with connection.cursor() as cursor:
        cursor.execute(f"{sql} FOR SHARE", params)


def _latest_history_ids(model: Any, qs: Any) -> dict[int, int]:
    """Newest django-simple-history id of each record of ``qs``."""
    rows = (
        model.history.filter(id__in=qs.values("pk"))
        .order_by()
        .values("id")
        .annotate(newest=Max("history_id"))
    )
    return {r["id"]: r["newest"] for r in rows}


def _records(model: Any, qs: Any, *, lock: bool) -> tuple[list[Any], dict[int, int]]:
    """The records of ``qs`` and their newest history ids, read in that order reversed.

    History ids are read first: a change committed in between leaves a newer record
    with an older history id, which :func:`upload_create` takes for a change.
    """
    if lock:
        _share_lock(qs)
    history = _latest_history_ids(model, qs)
    return list(qs), history


def _snap_of(objs: list[Any], history: dict[int, int], fields: tuple[str, ...]) -> dict:
    return {
        o.pk: (o.slug, {**{f: getattr(o, f) for f in fields}, "history_id": history.get(o.pk)})
        for o in objs
    }


def _catalogue(
    params: UploadParams, *, lock: bool = False
) -> tuple[InstrumentRecord, dict, dict, dict[str, dict]]:
    """The catalogue entries a conversion may use, and the snapshot of their curated fields.

    The snapshot maps ``instrument``/``sources``/``bands`` to ``{pk: (slug, fields and
    history_id)}``; ``lock`` share-locks the rows first (inside a transaction).
    """
    inst_qs = Instrument.objects.filter(slug=params.instrument)
    insts, inst_history = _records(Instrument, inst_qs, lock=lock)
    if not insts:
        raise _problem(f"unknown instrument {params.instrument!r}", "instrument")
    inst = insts[0]
    instrument = InstrumentRecord(
        id=inst.pk,
        slug=inst.slug,
        site=inst.site,
        default_time_format=inst.default_time_format,
        default_time_scale=inst.default_time_scale,
        default_time_reference=inst.default_time_reference,
        met_epoch=inst.met_epoch,
    )
    src_qs = Source.objects.all()
    band_qs = Band.objects.all()
    if params.source:
        src_qs = src_qs.filter(slug=params.source)
    if params.band:
        band_qs = band_qs.filter(slug=params.band)
    srcs, src_history = _records(Source, src_qs, lock=lock)
    band_objs, band_history = _records(Band, band_qs, lock=lock)
    if params.source and not srcs:
        raise _problem(f"unknown source {params.source!r}", "source")
    if params.band and not band_objs:
        raise _problem(f"unknown band {params.band!r}", "band")
    sources = {s.slug: SourceRecord(id=s.pk, slug=s.slug, ra=s.ra, dec=s.dec) for s in srcs}
    bands = {b.slug: BandRecord(id=b.pk, spec=b.spec()) for b in band_objs}
    snapshot = {
        "instrument": _snap_of(insts, inst_history, _SNAPSHOT_FIELDS["instrument"][1]),
        "sources": _snap_of(srcs, src_history, _SNAPSHOT_FIELDS["sources"][1]),
        "bands": _snap_of(band_objs, band_history, _SNAPSHOT_FIELDS["bands"][1]),
    }
    return instrument, sources, bands, snapshot


def _used_ids(instrument: InstrumentRecord, prepared: PreparedPoints) -> dict[str, list[int]]:
    return {
        "instrument": [instrument.id],
        "sources": sorted({int(i) for i in np.unique(prepared.source_id)}),
        "bands": sorted({int(i) for i in np.unique(prepared.band_id)}),
    }


def _snapshot_used(snapshot: dict[str, dict], used: dict[str, list[int]]) -> dict:
    """The ``parameters["metadata"]`` form: by slug, the records the points used."""
    return {key: dict(snapshot[key][pk] for pk in used[key] if pk in snapshot[key]) for key in used}


def _metadata_snapshot(instrument_id: int, source_ids: list[int], band_ids: list[int]) -> dict:
    """The curated values of these records now, with their history ids."""
    used = {"instrument": [instrument_id], "sources": source_ids, "bands": band_ids}
    snapshot = {}
    for key, (model, fields) in _SNAPSHOT_FIELDS.items():
        objs, history = _records(model, model.objects.filter(pk__in=used[key]), lock=False)
        snapshot[key] = _snap_of(objs, history, fields)
    return _snapshot_used(snapshot, used)


def checksum_lock(sha256: str) -> None:
    """Serialise concurrent writes of the same bytes, so the 409 rule holds under a race."""
    if connection.vendor == "postgresql":
        with connection.cursor() as cursor:
            cursor.execute("SELECT pg_advisory_xact_lock(%s)", [int(sha256[:15], 16)])


def upload_read(
    *,
    data: bytes,
    file_name: str,
    format: str | None,
    max_rows: int | None = None,
    max_columns: int | None = None,
) -> RawTable:
    """The file's table, or :class:`UploadInvalid` naming every problem the reader found."""
    try:
        return read_upload(
            data, filename=file_name, format=format, max_rows=max_rows, max_columns=max_columns
        )
    except ReadError as exc:
        raise UploadInvalid(exc.problems or [FileProblem(None, None, str(exc))]) from None


def upload_prepare(
    *, raw: RawTable, params: UploadParams
) -> tuple[InstrumentRecord, PreparedPoints]:
    """Check and convert a read file with the catalogue as it is now (no writes)."""
    catalogue = _catalogue(params)
    return catalogue[0], _convert(raw, params, catalogue)


def _convert(
    raw: RawTable, params: UploadParams, catalogue: tuple[InstrumentRecord, dict, dict, dict]
) -> PreparedPoints:
    """:func:`prepare_points` with the form's parameters and these catalogue records."""
    instrument, sources, bands, _ = catalogue
    prepared = prepare_points(
        raw,
        instrument=instrument,
        sources=sources,
        bands=bands,
        source=params.source,
        band=params.band,
        columns=params.columns,
        value_unit=params.value_unit,
        time_format=params.time_format,
        time_scale=params.time_scale,
        time_reference=params.time_reference,
        met_epoch=params.met_epoch,
    )
    if len(prepared) == 0:
        raise _problem("the file has no data rows")
    return prepared


def _upload_fields(
    *,
    uploader: Any,
    now: dt.datetime,
    sha256: str,
    file_name: str,
    raw: RawTable,
    instrument: InstrumentRecord,
    prepared: PreparedPoints,
    params: UploadParams,
    supersedes: Upload | None,
    extra_parameters: dict[str, Any] | None,
    metadata: dict[str, Any],
) -> dict[str, Any]:
    """The upload record's provenance fields (everything but the point counts)."""
    ts = prepared.time
    return dict(
        uploader=uploader,
        created_at=now,
        file_id=sha256,
        file_name=file_name[:255],
        format=raw.format,
        source=Source.objects.get(slug=params.source) if params.source else None,
        band=Band.objects.get(slug=params.band) if params.band else None,
        instrument_id=instrument.id,
        columns=prepared.columns,
        value_unit=prepared.value_unit,
        time_format=ts.time_format,
        time_scale=ts.time_scale,
        time_reference=ts.time_reference,
        met_epoch=ts.met_epoch,
        parameters={
            "time": {
                "format": ts.time_format,
                "scale": ts.time_scale,
                "reference": ts.time_reference,
                "met_epoch_mjd": ts.met_epoch,
                "met_unit_s": ts.met_unit_s,
                "time_zero": ts.time_zero,
                "from": ts.origin,
                "stored_as": "MJD (TDB) at the solar-system barycentre (BJD_TDB - 2400000.5)",
            },
            "value_unit": prepared.value_unit,
            "metadata": metadata,
            "read": {
                k: v for k, v in raw.meta.items() if k in ("delimiter", "header", "encoding", "hdu")
            },
            **(extra_parameters or {}),
        },
        reduction=params.reduction,
        reference=params.reference,
        embargo_until=params.embargo_until,
        supersedes=supersedes,
    )


def _point_stats(
    *, n_rows: int, n_points: int, n_upper_limits: int, time_min: float, time_max: float
) -> dict[str, Any]:
    return dict(
        n_rows=n_rows,
        n_points=n_points,
        n_upper_limits=n_upper_limits,
        time_min=time_min,
        time_max=time_max,
    )


def upload_store(
    *,
    uploader: Any,
    data: bytes,
    sha256: str,
    file_name: str,
    raw: RawTable,
    instrument: InstrumentRecord,
    prepared: PreparedPoints,
    params: UploadParams,
    supersedes: Upload | None,
    now: dt.datetime | None = None,
    extra_parameters: dict[str, Any] | None = None,
    metadata: dict[str, Any] | None = None,
) -> Upload:
    """Write the file (once per checksum), the upload record and its points; retire ``supersedes``.

    Runs inside the caller's transaction; the caller has checked the rights and the
    checksum rule. ``sha256`` is the checksum of ``data``; ``extra_parameters`` are
    added to the upload's recorded parameters. ``metadata`` is the snapshot of the
    curated records ``prepared`` was converted with (default: read them now).
    """
    source_ids = sorted({int(i) for i in np.unique(prepared.source_id)})
    band_ids = sorted({int(i) for i in np.unique(prepared.band_id)})
    now = now or timezone.now()
    if not StoredFile.objects.filter(pk=sha256).exists():
        stored_file_save(sha256=sha256, data=data, now=now)
    upload = Upload.objects.create(
        **_upload_fields(
            uploader=uploader,
            now=now,
            sha256=sha256,
            file_name=file_name,
            raw=raw,
            instrument=instrument,
            prepared=prepared,
            params=params,
            supersedes=supersedes,
            extra_parameters=extra_parameters,
            metadata=metadata
            if metadata is not None
            else _metadata_snapshot(instrument.id, source_ids, band_ids),
        ),
        **_point_stats(
            n_rows=len(raw.columns),
            n_points=len(prepared),
            n_upper_limits=int(prepared.upper_limit.sum()),
            time_min=float(prepared.t.min()),
            time_max=float(prepared.t.max()),
        ),
        warnings=prepared.warnings,
    )
    upload.sources.set(source_ids)
    points_load(prepared, instrument_id=instrument.id, upload_id=upload.pk)
    if supersedes is not None:
        _retire(supersedes, now)
    return upload


def _retire(old: Upload, now: dt.datetime) -> None:
    """Mark ``old`` superseded at ``now`` (its points stay, hidden after that instant)."""
    old.status = UploadStatus.SUPERSEDED
    old.superseded_at = now
    old.save(update_fields=["status", "superseded_at"])


#: Rows per piece of a streamed upload (see :func:`upload_create`).
STREAM_ROWS = 100_000

# Worker threads for the byte work that can run beside the request thread (hashlib and
# zlib release the GIL as they work): the file's SHA-256 while its head is read (18 ms
# for 31.5 MB here), and its zlib stream (level 1: 41 % of a CSV's size, ~10 ns a byte
# here) while PostgreSQL finishes the COPY.
_PACKER = ThreadPoolExecutor(max_workers=2, thread_name_prefix="lcstore-pack")


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


class _PiecesDisagree(Exception):
    """Two pieces of one file came out with different column roles, units or time settings."""


def _conflict_check(sha256: str, source_ids: list[int], uploader: Any, exclude: int | None) -> None:
    """Raise :class:`UploadConflict` if these bytes were already accepted for one of the sources."""
    existing = (
        Upload.objects.filter(file_id=sha256, status=UploadStatus.ACCEPTED, sources__in=source_ids)
        .exclude(pk=exclude)
        .order_by("created_at")
        .first()
    )
    if existing is not None:
        slugs = sorted(existing.sources.filter(pk__in=source_ids).values_list("slug", flat=True))
        raise UploadConflict(existing, slugs, visible=upload_visible_to(existing, uploader))


def _superseded(params: UploadParams, uploader: Any) -> Upload | None:
    """The upload ``params.supersedes`` names, locked, once the account may replace it."""
    if params.supersedes is None:
        return None
    old = Upload.objects.select_for_update().filter(pk=params.supersedes).first()
    if old is None or not upload_visible_to(old, uploader):
        # An upload the account may not see is answered as if it did not exist.
        raise _problem(f"upload {params.supersedes} does not exist", "supersedes")
    if old.uploader_id != uploader.pk and not roles.is_curator(uploader):
        raise UploadForbidden(f"upload {old.pk} belongs to another contributor")
    if old.status != UploadStatus.ACCEPTED:
        raise _problem(
            f"upload {old.pk} is {old.status}; only an accepted upload can be superseded",
            "supersedes",
        )
    return old


def _stream_store(
    *,
    uploader: Any,
    sha256: str,
    data: bytes,
    file_name: str,
    pieces: Any,
    catalogue: tuple[InstrumentRecord, dict, dict, dict[str, dict]],
    params: UploadParams,
    supersedes: Upload | None,
    now: dt.datetime,
) -> Upload:
    """Convert and load the file piece by piece into one COPY (inside the caller's transaction).

    Raises :class:`UploadInvalid` or :class:`ReadError` at the first piece with a
    problem, and :class:`_PiecesDisagree`; the caller rolls back and reads the file whole.
    """
    instrument, snapshot = catalogue[0], catalogue[3]

    def convert(raw: RawTable) -> PreparedPoints:
        return _convert(raw, params, catalogue)

    first_raw = next(pieces)
    first = convert(first_raw)
    upload = Upload.objects.create(
        **_upload_fields(
            uploader=uploader,
            now=now,
            sha256=sha256,
            file_name=file_name,
            raw=first_raw,
            instrument=instrument,
            prepared=first,
            params=params,
            supersedes=supersedes,
            extra_parameters=None,
            metadata={},
        ),
        **_point_stats(n_rows=0, n_points=0, n_upper_limits=0, time_min=0.0, time_max=0.0),
        warnings=[],
    )
    timing.mark("lock")
    n_rows = n_points = n_upper = 0
    t_min, t_max = np.inf, -np.inf
    source_ids: set[int] = set()
    band_ids: set[int] = set()
    warnings: list[str] = []
    with points_stream(instrument_id=instrument.id, upload_id=upload.pk) as write:
        raw, prepared = first_raw, first
        while True:
            if (prepared.columns, prepared.value_unit, prepared.time) != (
                first.columns,
                first.value_unit,
                first.time,
            ):
                raise _PiecesDisagree
            write(prepared)
            n_rows += len(raw)
            n_points += len(prepared)
            n_upper += int(prepared.upper_limit.sum())
            t_min = min(t_min, float(prepared.t.min()))
            t_max = max(t_max, float(prepared.t.max()))
            ids = _used_ids(instrument, prepared)
            source_ids.update(ids["sources"])
            band_ids.update(ids["bands"])
            warnings += [w for w in prepared.warnings if w not in warnings]
            raw = next(pieces, None)
            if raw is None:
                break
            prepared = convert(raw)
        # Python is idle from here until the COPY ends: compress the file meanwhile.
        packed = _PACKER.submit(zlib.compress, data, 1)
    timing.mark("copy")
    if not StoredFile.objects.filter(pk=sha256).exists():
        stored_file_save(sha256=sha256, data=data, now=now, packed=packed.result())
    used = {"instrument": [instrument.id], "sources": sorted(source_ids), "bands": sorted(band_ids)}
    stats = _point_stats(
        n_rows=n_rows, n_points=n_points, n_upper_limits=n_upper, time_min=t_min, time_max=t_max
    )
    upload.parameters["metadata"] = _snapshot_used(snapshot, used)
    Upload.objects.filter(pk=upload.pk).update(
        parameters=upload.parameters, warnings=warnings, **stats
    )
    for name, value in stats.items():
        setattr(upload, name, value)
    upload.warnings = warnings
    upload.sources.set(used["sources"])
    return upload


def upload_create(
    *,
    uploader: Any,
    data: bytes,
    file_name: str,
    params: UploadParams,
    max_rows: int | None = None,
    max_columns: int | None = None,
) -> Upload:
    """Read, check, convert and store one file, all or nothing.

    The checks of the file's head (encoding, delimiter, header, names, field
    counts) and the parse of its first piece run before the transaction, while a
    worker thread takes the file's SHA-256; the encoding and the lines of each
    later piece are checked as it comes. In the transaction
    the curated records a conversion may use are share-locked first (a curated
    change waits for the upload, then re-derives it), so the points always match
    ``parameters["metadata"]``. Then the file is parsed and converted in pieces of
    :data:`STREAM_ROWS` rows, each sent into one ``COPY`` while the next is
    prepared (:func:`lcstore.ingest.load.points_stream`). At the first piece with a
    problem the load is rolled back and the file is read and converted whole, so
    the error lists every problem exactly as for a file of one piece. The stages
    are marked for the ``Server-Timing`` header (:mod:`lcstore.timing`): head,
    lock, copy (or whole), store.

    Raises :class:`UploadInvalid` (every problem found, nothing stored) or
    :class:`UploadConflict` (same bytes already accepted for the same source).
    """
    checksum = _PACKER.submit(_sha256, data)
    read = dict(format=params.format, max_rows=max_rows, max_columns=max_columns)

    def whole() -> RawTable:
        return upload_read(data=data, file_name=file_name, **read)

    pieces = upload_read_chunks(data=data, file_name=file_name, chunk_rows=STREAM_ROWS, **read)
    try:
        pieces = itertools.chain([next(pieces)], pieces)
    except ReadError:
        pieces = iter([whole()])  # raises UploadInvalid, naming every problem
    sha256 = checksum.result()
    timing.mark("head")
    with transaction.atomic():
        # Curated rows first, then the checksum: a curated change re-deriving an upload of
        # the same bytes holds its row and then asks for the checksum lock.
        catalogue = _catalogue(params, lock=True)
        checksum_lock(sha256)
        if params.source:
            _conflict_check(sha256, [catalogue[1][params.source].id], uploader, None)
        old = _superseded(params, uploader)
        now = timezone.now()
        try:
            with transaction.atomic():  # a savepoint: a piece with a problem undoes the load
                upload = _stream_store(
                    uploader=uploader,
                    sha256=sha256,
                    data=data,
                    file_name=file_name,
                    pieces=pieces,
                    catalogue=catalogue,
                    params=params,
                    supersedes=old,
                    now=now,
                )
            if old is not None:
                _retire(old, now)
        except (ReadError, UploadInvalid, _PiecesDisagree):
            # The reference answer: the file read and converted as a whole, with the same
            # locked catalogue (which raises UploadInvalid naming every problem, unless only
            # a piece's types were odd).
            raw = whole()
            instrument, snapshot = catalogue[0], catalogue[3]
            prepared = _convert(raw, params, catalogue)
            used = _snapshot_used(snapshot, _used_ids(instrument, prepared))
            upload = upload_store(
                uploader=uploader,
                data=data,
                sha256=sha256,
                file_name=file_name,
                raw=raw,
                instrument=instrument,
                prepared=prepared,
                params=params,
                supersedes=old,
                now=now,
                metadata=used,
            )
            timing.mark("whole")
        if not params.source:
            ids = list(upload.sources.values_list("pk", flat=True))
            _conflict_check(sha256, ids, uploader, upload.pk)
    timing.mark("store")
    return upload


def upload_read_chunks(
    *,
    data: bytes,
    file_name: str,
    format: str | None,
    max_rows: int | None = None,
    max_columns: int | None = None,
    chunk_rows: int = STREAM_ROWS,
) -> Any:
    """The file's table in pieces (:func:`lcstore.ingest.readers.read_upload_chunks`)."""
    return read_upload_chunks(
        data,
        filename=file_name,
        format=format,
        max_rows=max_rows,
        max_columns=max_columns,
        chunk_rows=chunk_rows,
    )


def upload_retract(*, upload: Upload, user: Any, reason: str) -> Upload:
    """Mark an upload retracted (who, when, why); its points stay, hidden after that instant."""
    if upload.uploader_id != user.pk and not roles.is_curator(user):
        raise UploadForbidden("only the uploader or a curator may retract an upload")
    if not reason or not reason.strip():
        raise _problem("a retraction needs a reason", "reason")
    with transaction.atomic():
        locked = Upload.objects.select_for_update().get(pk=upload.pk)
        if locked.status == UploadStatus.RETRACTED:
            raise _problem(f"upload {locked.pk} is already retracted", "reason")
        locked.status = UploadStatus.RETRACTED
        locked.retracted_at = timezone.now()
        locked.retracted_by = user
        locked.retraction_reason = reason.strip()
        locked.save(update_fields=["status", "retracted_at", "retracted_by", "retraction_reason"])
    return locked
