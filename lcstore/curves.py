"""Band-merged, unit-converted, optionally binned light curves of one source.

The order of the steps is fixed and reported in every answer:
host-galaxy subtraction (when asked) → calibration offsets of each
(instrument, band) → Galactic dereddening (when asked) → binning in flux
space → conversion to the requested unit → time format. Binning always happens
on fluxes in the canonical unit, never on magnitudes (REFERENCES §4, §7).
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from lcstore.models import Band, CalibrationOffset, HostFlux, Instrument, Source, Upload
from lcstore.queries import (
    BinPartials,
    PointArrays,
    bin_partials_for_source,
    points_csv_copy,
    points_for_source,
    sql_fast_paths,
    uploads_visible,
)
from lcstore.science import binning, dust
from lcstore.science.units import ConversionError, check_output_unit, from_canonical

__all__ = [
    "BandCurve",
    "CurveRequest",
    "CurveRequestError",
    "Lightcurve",
    "lightcurve_build",
    "lightcurve_raw_csv",
    "parse_units",
    "pull_path",
]


class CurveRequestError(ValueError):
    """The request cannot be answered as asked (the message says which band and why)."""


@dataclass(frozen=True)
class CurveRequest:
    bands: list[str] | None = None
    instruments: list[str] | None = None
    units: list[str] | None = None
    bin: str | None = None
    origin: float = 0.0
    p0: float = 0.05
    start: float | None = None
    end: float | None = None
    upper_limits: str = "include"
    deredden: bool = False
    extinction_law: str = "ccm89"
    r_v: float = 3.1
    host: bool = False
    as_of: dt.datetime | None = None
    max_bins: int | None = None


@dataclass
class BandCurve:
    band: Band
    unit: str
    unit_label: str
    time: np.ndarray
    value: np.ndarray
    error: np.ndarray
    upper_limit: np.ndarray
    instrument: np.ndarray | None = None  # slugs, unbinned only
    upload: np.ndarray | None = None  # ids, unbinned only
    time_lo: np.ndarray | None = None
    time_hi: np.ndarray | None = None
    n: np.ndarray | None = None
    steps: list[str] = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.time)


@dataclass
class Lightcurve:
    source: Source
    request: CurveRequest
    binned: bool
    bin_width: float | None
    curves: list[BandCurve]
    uploads: list[Upload]

    @property
    def n_rows(self) -> int:
        return sum(len(c) for c in self.curves)


def parse_units(text: str | None, n_bands: int | None) -> list[str] | None:
    """``unit`` as given: one unit for all bands, or a comma list with one per band.

    Commas inside parentheses belong to the unit (none of astropy's strings use
    them, but be safe).
    """
    if text is None or not text.strip():
        return None
    parts: list[str] = []
    depth, cur = 0, ""
    for ch in text:
        depth += ch == "("
        depth -= ch == ")"
        if ch == "," and depth == 0:
            parts.append(cur.strip())
            cur = ""
        else:
            cur += ch
    parts.append(cur.strip())
    if any(not p for p in parts):
        raise CurveRequestError("unit: empty entry in the comma list")
    if len(parts) > 1 and n_bands is not None and len(parts) != n_bands:
        raise CurveRequestError(
            f"unit lists {len(parts)} units for {n_bands} bands; give one unit, or one per band"
        )
    return parts


def _resolve(model: Any, slugs: list[str] | None, what: str, extra: dict | None = None) -> list:
    if slugs is None:
        return list(model.objects.filter(**(extra or {})).order_by("slug"))
    found = {o.slug: o for o in model.objects.filter(slug__in=slugs)}
    missing = [s for s in slugs if s not in found]
    if missing:
        raise CurveRequestError(f"unknown {what}: {', '.join(missing)}")
    return [found[s] for s in slugs]


# How an answer is computed: the one place that chooses.
NUMPY = "numpy"
SQL_BINS = "sql-bins"
SQL_COPY = "sql-copy"


def pull_path(request: CurveRequest, *, fmt: str = "json", time_format: str = "mjd") -> str:
    """Which way the answer to ``request`` is computed; every path gives the same answer.

    - ``"sql-bins"``: fixed-width bins. PostgreSQL sums the points per (band,
      bin, upload, instrument) in one GROUP BY
      (:func:`lcstore.queries.bin_partials_for_source`) and
      :func:`lcstore.science.binning.bin_fixed_from_partials` applies the
      binning rules to the sums; calibration offsets and the dereddening
      factor are per-(instrument, band) multiplicative factors, so they apply
      to the sums. Equal to the numpy path up to rounding (sums in another
      order); when the sums are out of the float range the numpy path answers.
    - ``"sql-copy"``: raw points as CSV in the canonical unit with MJD times,
      written by PostgreSQL (``COPY (SELECT …) TO STDOUT (FORMAT csv, HEADER)``),
      byte for byte the text of the CSV renderer (floats from 1e15 on aside,
      see :func:`lcstore.queries._float_text_sql`).
    - ``"numpy"``: the points are fetched and every step runs on arrays. Used
      for everything else: other databases, ``as_of`` (curated values of the
      past), host subtraction (not a factor), Bayesian blocks, other units,
      time formats or output formats of raw points, dereddened raw points.
    """
    if not sql_fast_paths() or request.as_of is not None or request.host:
        return NUMPY
    if request.bin:
        return NUMPY if request.bin == "blocks" else SQL_BINS
    if fmt == "csv" and time_format == "mjd" and request.units is None and not request.deredden:
        return SQL_COPY
    return NUMPY


def _width_of(request: CurveRequest) -> float | None:
    """The fixed bin width in days, or None (no fixed bins, or a width that does not parse)."""
    if not request.bin or request.bin == "blocks":
        return None
    try:
        return binning.parse_bin_width(request.bin)
    except binning.BinningError:
        return None


def lightcurve_raw_csv(*, source: Source, user: Any, request: CurveRequest) -> Iterator[bytes]:
    """The raw points as CSV text written by PostgreSQL (``pull_path`` ``"sql-copy"``).

    Bands and instruments are checked here, before the first byte; the
    calibration offsets of today apply (the path is not used with ``as_of``).
    """
    bands = _resolve(Band, request.bands, "band") if request.bands is not None else None
    instruments = (
        _resolve(Instrument, request.instruments, "instrument") if request.instruments else None
    )
    offset_qs = CalibrationOffset.objects.all()
    if bands is not None:
        offset_qs = offset_qs.filter(band_id__in=[b.pk for b in bands])
    return points_csv_copy(
        source=source,
        user=user,
        bands=[(b.pk, b.slug) for b in bands] if bands is not None else None,
        instrument_ids=[i.pk for i in instruments] if instruments else None,
        start=request.start,
        end=request.end,
        include_limits=request.upper_limits != "exclude",
        factors={(o.instrument_id, o.band_id): o.factor for o in offset_qs},
    )


def lightcurve_build(*, source: Source, user: Any, request: CurveRequest) -> Lightcurve:
    """Assemble the curve answer (one selector call for the points or sums, then arrays only)."""
    # Without a band list, the bands are those the source has points in (read below).
    bands = _resolve(Band, request.bands, "band") if request.bands is not None else []
    instruments = (
        _resolve(Instrument, request.instruments, "instrument") if request.instruments else None
    )
    selection = dict(
        source=source,
        user=user,
        band_ids=[b.pk for b in bands] if request.bands is not None else None,
        instrument_ids=[i.pk for i in instruments] if instruments else None,
        start=request.start,
        end=request.end,
    )
    partials: BinPartials | None = None
    sql_width = _width_of(request)
    if pull_path(request) == SQL_BINS and sql_width is not None:
        try:
            partials = bin_partials_for_source(**selection, width=sql_width, origin=request.origin)
        except binning.PartialsOutOfRange:
            partials = None
    points = points_for_source(**selection, as_of=request.as_of) if partials is None else None
    present = partials.band_id if partials is not None else points.band_id  # type: ignore[union-attr]
    if request.bands is None:
        band_ids = sorted(set(present.tolist()))
        bands = list(Band.objects.filter(pk__in=band_ids).order_by("slug"))
    units = request.units
    if units and len(units) > 1 and len(units) != len(bands):
        raise CurveRequestError(
            f"unit lists {len(units)} units for {len(bands)} bands "
            f"({', '.join(b.slug for b in bands)}); give one unit, or one per band"
        )
    per_band_unit = {
        b.pk: (units[i] if units and len(units) > 1 else (units[0] if units else None))
        for i, b in enumerate(bands)
    }
    for b in bands:
        unit = per_band_unit[b.pk]
        if unit is not None:
            try:
                check_output_unit(unit, b.spec())
            except ConversionError as exc:
                raise CurveRequestError(str(exc)) from None
        if request.deredden and (b.kind != "flux_density" or not b.wavelength_eff):
            raise CurveRequestError(
                f"band {b.slug}: dereddening needs a flux-density band with an effective wavelength"
            )
    width = None
    if request.bin and request.bin != "blocks":
        try:
            width = binning.parse_bin_width(request.bin)
        except binning.BinningError as exc:
            raise CurveRequestError(str(exc)) from None

    band_ids = [b.pk for b in bands]
    ebv = source.ebv
    if request.as_of is not None:
        # Curated values as they were then (django-simple-history), so an as_of answer
        # is the answer the store gave at that instant.
        then = {b.pk: b for b in Band.history.as_of(request.as_of).filter(pk__in=band_ids)}
        bands = [then.get(b.pk, b) for b in bands]
        offset_qs = CalibrationOffset.history.as_of(request.as_of).filter(band_id__in=band_ids)
        host_qs = HostFlux.history.as_of(request.as_of).filter(
            source_id=source.pk, band_id__in=band_ids
        )
        past = Source.history.as_of(request.as_of).filter(pk=source.pk).first()
        ebv = past.ebv if past is not None else ebv
    else:
        offset_qs = CalibrationOffset.objects.filter(band_id__in=band_ids)
        host_qs = HostFlux.objects.filter(source=source, band_id__in=band_ids)
    offsets = {(o.instrument_id, o.band_id): o.factor for o in offset_qs}
    hosts = {h.band_id: h for h in host_qs}
    inst_slugs = dict(Instrument.objects.values_list("pk", "slug"))
    common = dict(
        request=request,
        width=width,
        offsets=offsets,
        inst_slugs=inst_slugs,
        ebv=ebv,
    )

    curves: list[BandCurve] = []
    used_uploads: list[int] = []
    if partials is not None:
        kept = partials.n_det > 0
        if request.upper_limits != "exclude":
            kept |= partials.n_lim > 0
        else:
            partials.n_lim = np.zeros_like(partials.n_lim)
        try:
            for b in bands:
                mine = partials.take((partials.band_id == b.pk) & kept)
                curves.append(_band_curve_partials(b, mine, unit=per_band_unit[b.pk], **common))
        except binning.PartialsOutOfRange:
            partials, curves = None, []
            points = points_for_source(**selection, as_of=request.as_of)
        else:
            used_uploads = sorted(set(partials.upload_id[kept].tolist()))
    if partials is None:
        assert points is not None
        if request.upper_limits == "exclude":
            points = points.take(~points.upper_limit)
        for b in bands:
            pts = points.take(points.band_id == b.pk)
            curves.append(
                _band_curve(b, pts, unit=per_band_unit[b.pk], host=hosts.get(b.pk), **common)
            )
        used_uploads = sorted(set(points.upload_id.tolist()))
    uploads = list(
        uploads_visible(user=user, source=source, as_of=request.as_of)
        .filter(pk__in=used_uploads)
        .select_related("uploader", "instrument", "band")
        .order_by("created_at")
    )
    return Lightcurve(
        source=source,
        request=request,
        binned=bool(request.bin),
        bin_width=width,
        curves=curves,
        uploads=uploads,
    )


def _offset_factors(
    band: Band,
    instrument_ids: np.ndarray,
    offsets: dict[tuple[int, int], float],
    inst_slugs: dict[int, str],
) -> tuple[dict[int, float], str | None]:
    """The offsets of this band whose instrument has points here, and the step that says so."""
    applied: dict[int, float] = {}
    for (inst_id, band_id), factor in offsets.items():
        if band_id == band.pk and (instrument_ids == inst_id).any():
            applied[inst_id] = factor
    if not applied:
        return applied, None
    text = ", ".join(f"{inst_slugs.get(i, i)} × {f:g}" for i, f in applied.items())
    return applied, "calibration offsets: " + text


def _dereddening(band: Band, request: CurveRequest, ebv: float) -> tuple[float, str | None]:
    """The Galactic dereddening factor of the band (1 unless asked) and its step."""
    if not request.deredden:
        return 1.0, None
    spec = band.spec()
    try:
        k = float(
            dust.deredden_factor(
                spec.wavelength_eff_aa, ebv=ebv, r_v=request.r_v, law=request.extinction_law
            )
        )
    except dust.ExtinctionError as exc:
        raise CurveRequestError(f"band {band.slug}: {exc}") from None
    return k, (
        f"dereddened: E(B-V) = {ebv:g}, R_V = {request.r_v:g}, law {request.extinction_law}, "
        f"at {spec.wavelength_eff_aa:g} Angstrom: factor {k:.6g}"
    )


def _fixed_bins_step(width: float | None, origin: float) -> str:
    return (
        f"bins of {width:g} d from origin MJD {origin:g}: inverse-variance "
        "weighted mean in flux, error (sum w)^-1/2"
    )


def _converted(
    band: Band,
    unit: str | None,
    time: np.ndarray,
    value: np.ndarray,
    error: np.ndarray,
    upper: np.ndarray,
    steps: list[str],
    curve_kw: dict[str, Any],
) -> BandCurve:
    """The last step (the output unit) and the band's curve."""
    if unit is None:
        from lcstore.science.units import canonical_unit

        label = canonical_unit(band.kind).to_string()
        out_unit = label
    else:
        try:
            value, error, label = from_canonical(value, error, unit, band.spec())
        except ConversionError as exc:
            raise CurveRequestError(str(exc)) from None
        steps.append(f"converted to {label}")
        out_unit = unit
    return BandCurve(
        band=band,
        unit=out_unit,
        unit_label=label,
        time=time,
        value=value,
        error=error,
        upper_limit=upper,
        steps=steps,
        **curve_kw,
    )


def _band_curve_partials(
    band: Band,
    parts: BinPartials,
    *,
    request: CurveRequest,
    unit: str | None,
    width: float | None,
    offsets: dict[tuple[int, int], float],
    inst_slugs: dict[int, str],
    ebv: float,
) -> BandCurve:
    """One band's fixed bins from the database's sums (``pull_path`` ``"sql-bins"``).

    The steps and their order are those of :func:`_band_curve`: calibration
    offsets, dereddening (both factors on values and errors, so on the sums
    of each (instrument, band) part), binning, output unit.
    """
    steps: list[str] = []
    applied, step = _offset_factors(band, parts.instrument_id, offsets, inst_slugs)
    factor = np.ones(len(parts))
    for inst_id, f in applied.items():
        factor[parts.instrument_id == inst_id] = f
    if step:
        steps.append(step)
    k, step = _dereddening(band, request, ebv)
    if step:
        factor = factor * k
        steps.append(step)
    try:
        bc = binning.bin_fixed_from_partials(
            parts.k,
            n_det=parts.n_det,
            n_lim=parts.n_lim,
            n_err=parts.n_err,
            sum_w=parts.sum_w,
            sum_wx=parts.sum_wx,
            mean=parts.mean,
            m2=parts.m2,
            min_limit=parts.min_limit,
            factor=factor,
            width=width or 1.0,
            origin=request.origin,
            max_bins=request.max_bins,
        )
    except binning.PartialsOutOfRange:
        raise
    except binning.BinningError as exc:
        raise CurveRequestError(f"band {band.slug}: {exc}") from None
    steps.append(_fixed_bins_step(width, request.origin))
    return _converted(
        band,
        unit,
        bc.time,
        bc.value,
        bc.error,
        bc.upper_limit,
        steps,
        {"time_lo": bc.time_lo, "time_hi": bc.time_hi, "n": bc.n},
    )


def _band_curve(
    band: Band,
    pts: PointArrays,
    *,
    request: CurveRequest,
    unit: str | None,
    width: float | None,
    offsets: dict[tuple[int, int], float],
    host: HostFlux | None,
    inst_slugs: dict[int, str],
    ebv: float,
) -> BandCurve:
    value = pts.value.copy()
    error = pts.error.copy()
    steps: list[str] = []
    if request.host:
        if host is None:
            raise CurveRequestError(
                f"band {band.slug}: no host-galaxy flux is curated for this source and band"
            )
        value = value - host.value
        if host.error is not None:
            error = np.hypot(error, host.error)
        steps.append(f"host-galaxy flux {host.value:g} subtracted (canonical unit)")
    applied, step = _offset_factors(band, pts.instrument_id, offsets, inst_slugs)
    if applied:
        factors = np.ones(len(value))
        for inst_id, factor in applied.items():
            factors[pts.instrument_id == inst_id] = factor
        value = value * factors
        error = error * factors
        steps.append(step)  # type: ignore[arg-type]
    k, step = _dereddening(band, request, ebv)
    if step:
        value, error = value * k, error * k
        steps.append(step)
    time = pts.t
    curve_kw: dict[str, Any] = {}
    if request.bin:
        try:
            if request.bin == "blocks":
                bc = binning.bin_blocks(
                    pts.t, value, error, pts.upper_limit, p0=request.p0, max_bins=request.max_bins
                )
                steps.append(f"Bayesian blocks (Scargle et al. 2013), p0 = {request.p0:g}")
            else:
                bc = binning.bin_fixed(
                    pts.t,
                    value,
                    error,
                    pts.upper_limit,
                    width=width or 1.0,
                    origin=request.origin,
                    max_bins=request.max_bins,
                )
                steps.append(_fixed_bins_step(width, request.origin))
        except binning.BinningError as exc:
            raise CurveRequestError(f"band {band.slug}: {exc}") from None
        time, value, error, upper = bc.time, bc.value, bc.error, bc.upper_limit
        curve_kw = {"time_lo": bc.time_lo, "time_hi": bc.time_hi, "n": bc.n}
    else:
        upper = pts.upper_limit
        curve_kw = {
            "instrument": np.array(
                [inst_slugs.get(i, "") for i in pts.instrument_id.tolist()], dtype=object
            ),
            "upload": pts.upload_id,
        }
    return _converted(band, unit, time, value, error, upper, steps, curve_kw)
