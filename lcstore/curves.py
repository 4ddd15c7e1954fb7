"""Band-merged, unit-converted, optionally binned light curves of one source.

The order of the steps is fixed and reported in every answer:
host-galaxy subtraction (when asked) → calibration offsets of each
(instrument, band) → Galactic dereddening (when asked) → binning in flux
space → conversion to the requested unit → time format. Binning always happens
on fluxes in the canonical unit, never on magnitudes (REFERENCES §4, §7).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from lcstore.models import Band, CalibrationOffset, HostFlux, Instrument, Source, Upload
from lcstore.queries import PointArrays, points_for_source, uploads_visible
from lcstore.science import binning, dust
from lcstore.science.units import ConversionError, check_output_unit, from_canonical

__all__ = [
    "BandCurve",
    "CurveRequest",
    "CurveRequestError",
    "Lightcurve",
    "lightcurve_build",
    "parse_units",
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


def lightcurve_build(*, source: Source, user: Any, request: CurveRequest) -> Lightcurve:
    """Assemble the curve answer (one selector call for the points, then arrays only)."""
    # Without a band list, the bands are those the source has points in (read below).
    bands = _resolve(Band, request.bands, "band") if request.bands is not None else []
    instruments = (
        _resolve(Instrument, request.instruments, "instrument") if request.instruments else None
    )
    points = points_for_source(
        source=source,
        user=user,
        band_ids=[b.pk for b in bands] if request.bands is not None else None,
        instrument_ids=[i.pk for i in instruments] if instruments else None,
        start=request.start,
        end=request.end,
        as_of=request.as_of,
    )
    if request.bands is None:
        band_ids = sorted(set(points.band_id.tolist()))
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
    if request.upper_limits == "exclude":
        points = points.take(~points.upper_limit)

    curves = []
    for b in bands:
        pts = points.take(points.band_id == b.pk)
        curves.append(
            _band_curve(
                b,
                pts,
                request=request,
                unit=per_band_unit[b.pk],
                width=width,
                offsets=offsets,
                host=hosts.get(b.pk),
                inst_slugs=inst_slugs,
                ebv=ebv,
            )
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
    spec = band.spec()
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
    factors = np.ones(len(value))
    applied = []
    for (inst_id, band_id), factor in offsets.items():
        if band_id != band.pk:
            continue
        mask = pts.instrument_id == inst_id
        if mask.any():
            factors[mask] = factor
            applied.append(f"{inst_slugs.get(inst_id, inst_id)} × {factor:g}")
    if applied:
        value = value * factors
        error = error * factors
        steps.append("calibration offsets: " + ", ".join(applied))
    if request.deredden:
        try:
            k = float(
                dust.deredden_factor(
                    spec.wavelength_eff_aa, ebv=ebv, r_v=request.r_v, law=request.extinction_law
                )
            )
        except dust.ExtinctionError as exc:
            raise CurveRequestError(f"band {band.slug}: {exc}") from None
        value, error = value * k, error * k
        steps.append(
            f"dereddened: E(B-V) = {ebv:g}, R_V = {request.r_v:g}, law {request.extinction_law}, "
            f"at {spec.wavelength_eff_aa:g} Angstrom: factor {k:.6g}"
        )
    out_unit = unit or "canonical"
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
                steps.append(
                    f"bins of {width:g} d from origin MJD {request.origin:g}: inverse-variance "
                    "weighted mean in flux, error (sum w)^-1/2"
                )
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
    if unit is None:
        from lcstore.science.units import canonical_unit

        label = canonical_unit(band.kind).to_string()
        out_unit = label
    else:
        try:
            value, error, label = from_canonical(value, error, unit, spec)
        except ConversionError as exc:
            raise CurveRequestError(str(exc)) from None
        steps.append(f"converted to {label}")
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
