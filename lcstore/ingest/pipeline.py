"""Turn a read file into canonical point arrays: column roles, checks, units, BJD_TDB.

No database access here: the catalogue entries the file refers to are handed
in as plain records, so the whole step runs (and is tested) on arrays. Every
conversion is done on whole columns (one astropy call per band or source), so
a million-row file is converted without a Python loop over rows.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from lcstore.ingest.columns import (
    ProblemList,
    boolean_column,
    numeric_column,
    resolve_columns,
    text_column,
)
from lcstore.ingest.readers import FileProblem, RawTable
from lcstore.science.times import (
    PLAUSIBLE_MJD,
    TIME_FORMATS,
    TIME_REFERENCES,
    TIME_SCALES,
    TimeConversionError,
    fits_time_info,
    to_bjd_tdb_mjd,
)
from lcstore.science.units import BandSpec, ConversionError, to_canonical

__all__ = [
    "BandRecord",
    "InstrumentRecord",
    "PreparedPoints",
    "SourceRecord",
    "TimeSettings",
    "UploadInvalid",
    "prepare_points",
]


class UploadInvalid(ValueError):
    """The file cannot be stored; ``problems`` lists every row/column problem found."""

    def __init__(self, problems: list[FileProblem], total: int | None = None):
        self.problems = problems
        self.total = total if total is not None else len(problems)
        first = problems[0].message if problems else "invalid upload"
        super().__init__(f"{self.total} problem(s) in the upload; first: {first}")


@dataclass(frozen=True)
class SourceRecord:
    id: int
    slug: str
    ra: float
    dec: float


@dataclass(frozen=True)
class BandRecord:
    id: int
    spec: BandSpec


@dataclass(frozen=True)
class InstrumentRecord:
    id: int
    slug: str
    site: tuple[float, float, float] | None
    default_time_format: str
    default_time_scale: str
    default_time_reference: str
    met_epoch: float | None


@dataclass(frozen=True)
class TimeSettings:
    time_format: str
    time_scale: str
    time_reference: str
    met_epoch: float | None
    met_unit_s: float = 1.0
    time_zero: float = 0.0
    origin: str = "instrument defaults"


@dataclass
class PreparedPoints:
    """Canonical arrays ready to load, sorted by (source, band, t)."""

    source_id: np.ndarray
    band_id: np.ndarray
    t: np.ndarray
    value: np.ndarray
    error: np.ndarray
    upper_limit: np.ndarray
    time_error: np.ndarray
    time_orig: np.ndarray
    value_orig: np.ndarray
    error_orig: np.ndarray
    columns: dict[str, str]
    value_unit: str
    time: TimeSettings
    warnings: list[str] = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.t)


def _time_settings(
    raw: RawTable,
    instrument: InstrumentRecord,
    *,
    time_format: str | None,
    time_scale: str | None,
    time_reference: str | None,
    met_epoch: float | None,
    problems: ProblemList,
) -> TimeSettings:
    """Explicit parameters win, then FITS time keywords in the file, then the instrument."""
    met_unit_s, time_zero, origin = 1.0, 0.0, "instrument defaults"
    fits_info = None
    if raw.format == "fits" and any(
        k in raw.meta for k in ("TIMESYS", "MJDREFI", "MJDREF", "JDREF", "DATEREF")
    ):
        try:
            fits_info = fits_time_info(raw.meta)
        except TimeConversionError as exc:
            problems.add(None, None, f"FITS time keywords: {exc}")
    fmt = time_format or ("met" if fits_info else instrument.default_time_format)
    if fits_info is not None and fmt == "met":
        scale = time_scale or fits_info.time_scale
        reference = time_reference or fits_info.time_reference
        epoch = met_epoch if met_epoch is not None else fits_info.met_epoch_mjd
        met_unit_s, time_zero = fits_info.met_unit_s, fits_info.time_zero
        origin = "FITS time keywords (Rots et al. 2015)"
    else:
        scale = time_scale or instrument.default_time_scale
        reference = time_reference or instrument.default_time_reference
        epoch = met_epoch if met_epoch is not None else instrument.met_epoch
        if time_format or time_scale or time_reference:
            origin = "upload parameters"
    if time_format or time_scale or time_reference or met_epoch is not None:
        origin = "upload parameters" if fits_info is None else origin + " and upload parameters"
    if fmt not in TIME_FORMATS:
        problems.add(None, None, f"time_format {fmt!r} is not one of {', '.join(TIME_FORMATS)}")
    if scale not in TIME_SCALES:
        problems.add(None, None, f"time_scale {scale!r} is not one of {', '.join(TIME_SCALES)}")
    if reference not in TIME_REFERENCES:
        problems.add(
            None,
            None,
            f"time_reference {reference!r} is not one of {', '.join(TIME_REFERENCES)}",
        )
    if fmt == "met" and epoch is None:
        problems.add(None, None, "time_format met needs met_epoch (MJD), none given or curated")
    return TimeSettings(fmt, scale, reference, epoch, met_unit_s, time_zero, origin)


def _approx_mjd(values: np.ndarray, ts: TimeSettings) -> np.ndarray:
    """MJD to within minutes, for the plausibility check before astropy sees the times."""
    with np.errstate(all="ignore"):
        if ts.time_format == "mjd":
            return values
        if ts.time_format == "jd":
            return values - 2400000.5
        if ts.time_format == "unix":
            return values / 86400.0 + 40587.0
        if ts.time_format == "decimalyear":
            return (values - 2000.0) * 365.25 + 51544.5
        if ts.time_format == "met":
            return (ts.met_epoch or 0.0) + (values + ts.time_zero) * ts.met_unit_s / 86400.0
    return values


def _time_error_days(values: np.ndarray, ts: TimeSettings) -> np.ndarray:
    """Time errors come in the time column's own unit (days for mjd/jd, s for unix/met/isot)."""
    if ts.time_format in ("mjd", "jd"):
        return values
    if ts.time_format == "decimalyear":
        return values * 365.25
    if ts.time_format == "met":
        return values * ts.met_unit_s / 86400.0
    return values / 86400.0


def _lookup_column(
    labels: np.ndarray,
    known: Mapping[str, Any],
    row_numbers: np.ndarray,
    column: str,
    what: str,
    problems: ProblemList,
) -> np.ndarray:
    """Integer codes into ``list(known)`` for each row; unknown labels are row problems."""
    keys = list(known)
    codes, uniques = pd.factorize(labels)
    mapped = np.array([keys.index(u) if u in known else -1 for u in uniques], dtype=np.int64)
    result = mapped[codes] if len(uniques) else np.zeros(0, dtype=np.int64)
    for u_index, label in enumerate(uniques):
        if mapped[u_index] < 0:
            message = f"no {what} given" if label == "" else f"unknown {what} {label!r}"
            problems.add_rows(codes == u_index, row_numbers, column, message)
    return result


def prepare_points(
    raw: RawTable,
    *,
    instrument: InstrumentRecord,
    sources: Mapping[str, SourceRecord],
    bands: Mapping[str, BandRecord],
    source: str | None,
    band: str | None,
    columns: Mapping[str, Any] | None,
    value_unit: str | None,
    time_format: str | None = None,
    time_scale: str | None = None,
    time_reference: str | None = None,
    met_epoch: float | None = None,
) -> PreparedPoints:
    """Check and convert every row; raise :class:`UploadInvalid` listing all problems.

    ``sources`` and ``bands`` hold the catalogue entries by slug (the caller passes
    those named by the file or the form). ``source``/``band`` fix them for the whole
    file; otherwise a ``source``/``band`` column names them per row.
    """
    problems = ProblemList()
    df = raw.columns
    names = [str(c) for c in df.columns]
    required = ("time", "value") + (() if source else ("source",)) + (() if band else ("band",))
    roles = resolve_columns(names, columns, required=required, problems=problems)
    ts = _time_settings(
        raw,
        instrument,
        time_format=time_format,
        time_scale=time_scale,
        time_reference=time_reference,
        met_epoch=met_epoch,
        problems=problems,
    )
    if problems:
        raise UploadInvalid(problems.items, problems.total)
    rows = raw.row_numbers
    n = len(df)

    # Values and errors.
    vcol = roles["value"]
    value = numeric_column(df[vcol], rows, vcol, problems, allow_missing=False, what="value")
    if "error" in roles:
        ecol = roles["error"]
        error = numeric_column(df[ecol], rows, ecol, problems, allow_missing=True, what="error")
        problems.add_rows(error <= 0, rows, ecol, "error must be positive")
    else:
        error = np.full(n, np.nan)
    if "upper_limit" in roles:
        ucol = roles["upper_limit"]
        upper = boolean_column(df[ucol], rows, ucol, problems)
    else:
        upper = np.zeros(n, dtype=bool)

    # Times: numbers, or ISO strings.
    tcol = roles["time"]
    if ts.time_format == "isot":
        text = text_column(df[tcol])
        parsed = pd.to_datetime(pd.Series(text), errors="coerce", utc=True, format="ISO8601")
        bad = parsed.isna().to_numpy()
        problems.add_rows(bad, rows, tcol, "time is not an ISO 8601 date-time")
        approx = np.where(
            bad,
            np.nan,
            parsed.to_numpy(dtype="datetime64[ns]").astype("datetime64[us]").astype(np.int64)
            / 86400e6
            + 40587.0,
        )
        time_values: np.ndarray = text
        time_orig = approx
    else:
        time_values = numeric_column(
            df[tcol], rows, tcol, problems, allow_missing=False, what="time"
        )
        approx = _approx_mjd(time_values, ts)
        time_orig = time_values
    lo, hi = PLAUSIBLE_MJD
    problems.add_rows(
        np.isfinite(approx) & ((approx < lo) | (approx > hi)),
        rows,
        tcol,
        f"time is outside the plausible range (MJD {lo:.0f}–{hi:.0f}, years 1900–2100) "
        f"for time_format {ts.time_format}",
    )
    if "time_error" in roles:
        tecol = roles["time_error"]
        terr = numeric_column(
            df[tecol], rows, tecol, problems, allow_missing=True, what="time error"
        )
        problems.add_rows(terr < 0, rows, tecol, "time error cannot be negative")
        time_error = _time_error_days(terr, ts)
    else:
        time_error = np.full(n, np.nan)

    # Which source and band each row belongs to.
    if source:
        src_code = np.zeros(n, dtype=np.int64)
        src_keys = [source]
    else:
        scol = roles["source"]
        src_code = _lookup_column(text_column(df[scol]), sources, rows, scol, "source", problems)
        src_keys = list(sources)
    if band:
        band_code = np.zeros(n, dtype=np.int64)
        band_keys = [band]
    else:
        bcol = roles["band"]
        band_code = _lookup_column(text_column(df[bcol]), bands, rows, bcol, "band", problems)
        band_keys = list(bands)

    unit = value_unit or raw.units.get(vcol) or ""
    if not unit:
        problems.add(
            None,
            vcol,
            f"no unit for column {vcol!r}: give value_unit (an astropy unit string, 'mag' "
            "or 'ABmag') or use a format that carries column units",
        )
    if problems:
        raise UploadInvalid(problems.items, problems.total)

    # Units: one vectorised conversion per band.
    canon_value = np.empty(n)
    canon_error = np.empty(n)
    err_unit_note = None
    if "error" in roles and value_unit is None:
        eu = raw.units.get(roles["error"])
        if eu and eu != unit:
            err_unit_note = f"error column unit {eu!r} differs from the value unit {unit!r}"
    if err_unit_note:
        problems.add(None, roles["error"], err_unit_note + "; give value_unit to say which holds")
    for code, key in enumerate(band_keys):
        mask = band_code == code
        if not mask.any():
            continue
        try:
            v, e = to_canonical(value[mask], error[mask], unit, bands[key].spec)
        except ConversionError as exc:
            problems.add(None, vcol, str(exc))
            continue
        canon_value[mask] = v
        canon_error[mask] = e
    if problems:
        raise UploadInvalid(problems.items, problems.total)
    # Negative fluxes of detections are legitimate (background-subtracted faint
    # states); a negative limit is not.
    problems.add_rows(~np.isfinite(canon_value), rows, vcol, "value cannot be converted to a flux")
    problems.add_rows(
        np.isfinite(canon_value) & (canon_value < 0) & upper,
        rows,
        vcol,
        "an upper limit cannot be negative",
    )

    # Times: one vectorised conversion per source (its position sets the light time).
    t = np.empty(n)
    for code, key in enumerate(src_keys):
        mask = src_code == code
        if not mask.any():
            continue
        rec = sources[key]
        tv = time_values[mask]
        if ts.time_format != "isot" and ts.time_zero:
            tv = tv + ts.time_zero
        try:
            t[mask] = to_bjd_tdb_mjd(
                tv,
                time_format=ts.time_format,
                time_scale=ts.time_scale,
                time_reference=ts.time_reference,
                ra_deg=rec.ra,
                dec_deg=rec.dec,
                site=instrument.site,
                met_epoch_mjd=ts.met_epoch,
                met_unit_s=ts.met_unit_s,
            )
        except (TimeConversionError, ValueError) as exc:
            problems.add(None, tcol, f"times cannot be converted to BJD_TDB: {exc}")
    if problems:
        raise UploadInvalid(problems.items, problems.total)

    source_id = np.array([sources[k].id for k in src_keys], dtype=np.int64)[src_code]
    band_id = np.array([bands[k].id for k in band_keys], dtype=np.int64)[band_code]
    order = np.lexsort((t, band_id, source_id))
    warnings: list[str] = []
    if "error" not in roles:
        warnings.append("no error column: points are stored without errors")
    if raw.meta.get("encoding_fallback"):
        warnings.append(f"file was not UTF-8; read as {raw.meta['encoding_fallback']}")
    return PreparedPoints(
        source_id=source_id[order],
        band_id=band_id[order],
        t=t[order],
        value=canon_value[order],
        error=canon_error[order],
        upper_limit=upper[order],
        time_error=time_error[order],
        time_orig=np.asarray(time_orig, dtype=float)[order],
        value_orig=value[order],
        error_orig=error[order],
        columns=roles,
        value_unit=unit,
        time=ts,
        warnings=warnings,
    )
