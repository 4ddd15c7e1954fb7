"""Time stamps of light-curve points: conversion to BJD_TDB and the FITS time keywords.

lcstore stores every time as MJD in the TDB scale at the solar-system
barycentre, BJD_TDB - 2400000.5 (Eastman, Siverd & Gaudi 2010, PASP 122,
935). :func:`to_bjd_tdb_mjd` takes times as uploaded, in any of
:data:`TIME_FORMATS`, :data:`TIME_SCALES` and :data:`TIME_REFERENCES` (the
reference-position words of the FITS time standard, Rots et al. 2015, A&A
574, A36), and does the conversion with astropy:

* time scales with ``astropy.time.Time`` (leap seconds from astropy's table,
  TDB - TT from ``erfa.dtdb`` with the observer's position);
* the Roemer delay to the barycentre with ``Time.light_travel_time`` (astropy's
  built-in ephemeris, good to a few microseconds), for the observing site or
  the geocentre.

Astropy never reaches for the network from this module: the IERS
auto-download is switched off at import.

Large inputs: the correction BJD_TDB - TT is a smooth function of time, so
for inputs much denser than a 1/64-day grid it is computed exactly on that
grid and interpolated with a local cubic (4-point Lagrange) polynomial. The
fastest term is the diurnal motion of the site (at most 21.3 ms, one
sidereal day), whose interpolation error on this grid is below 0.1 µs,
less than the 0.6 µs resolution of a float64 MJD near the present.

Epochs at the edges of :data:`PLAUSIBLE_MJD`: outside astropy's bundled
Earth-orientation table, astropy takes polar motion and UT1 - UTC as zero
(they move a site's light time by at most ~2 µs), and outside the era of the
leap-second table erfa uses its own approximation of TAI - UTC. Both are
converted silently here (erfa's "dubious year" and astropy's IERS-range
warnings are filtered during the conversion); the caller's validation owns
the plausibility of the epochs.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Final

import astropy.units as u
import erfa
import numpy as np
from astropy import constants
from astropy.coordinates import (
    CartesianRepresentation,
    EarthLocation,
    SkyCoord,
    get_body_barycentric,
)
from astropy.time import Time, TimeDelta
from astropy.utils import iers
from astropy.utils.exceptions import AstropyWarning
from numpy.typing import ArrayLike, NDArray

iers.conf.auto_download = False
iers.conf.auto_max_age = None

__all__ = [
    "PLAUSIBLE_MJD",
    "TIME_FORMATS",
    "TIME_REFERENCES",
    "TIME_SCALES",
    "FitsTimeInfo",
    "TimeConversionError",
    "fits_time_info",
    "light_travel_correction_s",
    "mjd_tdb_to",
    "to_bjd_tdb_mjd",
]

FloatArray = NDArray[np.float64]

#: MJD range accepted by validation: 1900-01-01 to 2100-01-01.
PLAUSIBLE_MJD: tuple[float, float] = (15020.0, 88069.0)
TIME_FORMATS: Final = ("mjd", "jd", "isot", "unix", "decimalyear", "met")
TIME_SCALES: Final = ("utc", "tt", "tai", "tdb")
TIME_REFERENCES: Final = ("TOPOCENTER", "GEOCENTER", "HELIOCENTER", "BARYCENTER")

_MJD_ZERO_JD: Final = float(erfa.DJM0)  # JD of MJD 0, 2400000.5 (definition)
_SECONDS_PER_DAY: Final = float(u.day.to(u.s))
_UNIX_EPOCH_MJD: Final = float(Time(0.0, format="unix").mjd)
_J2000_MJD: Final = float(Time(2000.0, format="decimalyear", scale="tt").mjd)
_JULIAN_YEAR_D: Final = float(u.yr.to(u.day))
_C: Final = constants.c

# Interpolation grid of the correction BJD_TDB - TT (days) and the density
# gain below which the exact per-point computation is used instead.
_GRID_STEP_D: Final = 1.0 / 64.0
_GRID_GAIN: Final = 4


class TimeConversionError(ValueError):
    """Times cannot be converted (unknown format, scale or reference, missing epoch, ...)."""


@contextmanager
def _quiet_edges() -> Iterator[None]:
    """Silence erfa's "dubious year" and astropy's IERS-range warnings (module notes)."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*dubious year", category=erfa.ErfaWarning)
        warnings.filterwarnings(
            "ignore", message="Tried to get polar motions", category=AstropyWarning
        )
        warnings.filterwarnings(
            "ignore", message=".*outside of range covered by IERS table", category=AstropyWarning
        )
        yield


# ---------------------------------------------------------------------------
# Argument checks
# ---------------------------------------------------------------------------


def _choice(value: str, allowed: tuple[str, ...], what: str, *, upper: bool) -> str:
    if not isinstance(value, str):
        raise TimeConversionError(f"{what} must be a string, not {value!r}")
    key = value.strip().upper() if upper else value.strip().lower()
    if key not in allowed:
        raise TimeConversionError(
            f"unknown {what} {value!r} (expected one of {', '.join(allowed)})"
        )
    return key


def _sky_coord(ra_deg: float, dec_deg: float) -> SkyCoord:
    try:
        ra, dec = float(ra_deg), float(dec_deg)
    except (TypeError, ValueError):
        raise TimeConversionError(
            f"source position ra={ra_deg!r}, dec={dec_deg!r} is not a pair of numbers"
        ) from None
    if not (math.isfinite(ra) and math.isfinite(dec) and -90.0 <= dec <= 90.0):
        raise TimeConversionError(f"source position ra={ra}, dec={dec} (degrees) is not valid")
    return SkyCoord(ra * u.deg, dec * u.deg, frame="icrs")


def _site_location(site: tuple[float, float, float] | None) -> EarthLocation | None:
    """Geodetic (lon deg, lat deg, height m) on WGS84 -> EarthLocation; None = geocentre."""
    if site is None:
        return None
    try:
        lon, lat, height = (float(x) for x in site)
    except (TypeError, ValueError):
        raise TimeConversionError(
            f"site {site!r} is not (longitude deg, latitude deg, height m)"
        ) from None
    if not (all(map(math.isfinite, (lon, lat, height))) and -90.0 <= lat <= 90.0):
        raise TimeConversionError(f"site {site!r} is not a valid geodetic position")
    return EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, height * u.m)


# ---------------------------------------------------------------------------
# Input times
# ---------------------------------------------------------------------------


def _approx_mjd(
    v: FloatArray, fmt: str, met_epoch_mjd: float | None, met_unit_s: float
) -> FloatArray:
    """MJD of numeric times to about a day, for the plausibility mask only."""
    if fmt == "mjd":
        return v
    if fmt == "jd":
        return v - _MJD_ZERO_JD
    if fmt == "unix":
        return _UNIX_EPOCH_MJD + v / _SECONDS_PER_DAY
    if fmt == "decimalyear":
        return _J2000_MJD + (v - 2000.0) * _JULIAN_YEAR_D
    assert met_epoch_mjd is not None
    return met_epoch_mjd + v * (met_unit_s / _SECONDS_PER_DAY)


def _in_range(mjd: FloatArray) -> NDArray[np.bool_]:
    lo, hi = PLAUSIBLE_MJD
    with np.errstate(invalid="ignore"):
        return np.isfinite(mjd) & (mjd >= lo) & (mjd <= hi)


def _input_times(
    flat: NDArray[Any], fmt: str, scale: str, met_epoch_mjd: float | None, met_unit_s: float
) -> tuple[Time, NDArray[np.bool_]]:
    """Time object of the plausible entries of ``flat`` and the mask that selects them."""
    if fmt == "isot":
        text = flat.astype(str)
        try:
            with warnings.catch_warnings():
                # Dates before 1900 or after 2100 are masked out just below.
                warnings.simplefilter("ignore", erfa.ErfaWarning)
                t = Time(text, format="isot", scale=scale)
        except ValueError as exc:
            raise TimeConversionError(f"cannot read ISO 8601 times ({exc})") from None
        ok = _in_range(np.asarray(t.mjd, dtype=np.float64))
        return t[ok], ok
    try:
        v = flat.astype(np.float64)
    except (TypeError, ValueError):
        raise TimeConversionError(f"time_format {fmt} needs numbers") from None
    ok = _in_range(_approx_mjd(v, fmt, met_epoch_mjd, met_unit_s))
    v = v[ok]
    if fmt == "met":
        assert met_epoch_mjd is not None
        # Elapsed SI seconds from an epoch in the given scale; for UTC astropy
        # adds them in TAI, so leap seconds inside the interval are counted.
        epoch = Time(met_epoch_mjd, format="mjd", scale=scale)
        return epoch + TimeDelta(v * met_unit_s, format="sec"), ok
    return Time(v, format=fmt, scale=scale), ok


# ---------------------------------------------------------------------------
# Corrections
# ---------------------------------------------------------------------------


def _light_time_days(
    tdb: Time, coord: SkyCoord, location: EarthLocation | None, kind: str
) -> FloatArray:
    """Roemer delay n·r/c (days) of an observer at ``location`` (None: the geocentre).

    With a site: astropy ``Time.light_travel_time``. At the geocentre the same
    quantity is the projection of the Earth's barycentric (or heliocentric)
    position from astropy's built-in ephemeris, which skips the Earth-rotation
    transform of a zero vector (and its IERS look-ups).
    """
    if location is not None:
        ltt = tdb.light_travel_time(coord, kind=kind, location=location)
        return np.asarray(ltt.to_value(u.day), dtype=np.float64)
    earth = get_body_barycentric("earth", tdb)
    if kind == "heliocentric":
        earth = earth - get_body_barycentric("sun", tdb)
    direction: CartesianRepresentation = coord.icrs.cartesian
    delay = earth.dot(direction) / _C
    return np.asarray(delay.to_value(u.day), dtype=np.float64)


def _correction_days(
    tt: Time, reference: str, coord: SkyCoord | None, location: EarthLocation | None
) -> FloatArray:
    """BJD_TDB - TT in days at the TT instants ``tt``, as plain float arithmetic on labels."""
    t = Time(tt.jd1, tt.jd2, format="jd", scale="tt", location=location)
    tdb = t.tdb
    days = (tdb.jd1 - t.jd1) + (tdb.jd2 - t.jd2)
    if reference == "BARYCENTER":
        return np.asarray(days, dtype=np.float64)
    assert coord is not None
    if reference == "HELIOCENTER":
        # t is a heliocentric time: BJD = HJD - (heliocentric delay) + (barycentric
        # delay), both at the geocentre and at the time t itself. Their difference
        # (the Sun's barycentric offset, <= 4 s) moves with the Sun at ~13 m/s, so
        # evaluating it at t rather than at the true Earth time (up to 499 s
        # away) errs by at most a few tens of microseconds (about 11 us found
        # against astropy over a year in tests/science/test_times.py).
        bary = _light_time_days(tdb, coord, None, "barycentric")
        helio = _light_time_days(tdb, coord, None, "heliocentric")
        return np.asarray(days + bary - helio, dtype=np.float64)
    bary = _light_time_days(tdb, coord, location, "barycentric")
    return np.asarray(days + bary, dtype=np.float64)


def _interpolated_correction_days(
    tt: Time, reference: str, coord: SkyCoord | None, location: EarthLocation | None
) -> FloatArray:
    """BJD_TDB - TT (days): exact, or 4-point Lagrange interpolation on a 1/64-day TT grid."""
    x = np.asarray((tt.jd1 - _MJD_ZERO_JD) + tt.jd2, dtype=np.float64)
    cell = np.floor(x / _GRID_STEP_D).astype(np.int64)
    cells = np.unique(cell)
    nodes = np.unique(np.concatenate([cells - 1, cells, cells + 1, cells + 2]))
    if nodes.size * _GRID_GAIN > x.size:
        return _correction_days(tt, reference, coord, location)
    node_tt = Time(nodes * _GRID_STEP_D, format="mjd", scale="tt")
    at_nodes = _correction_days(node_tt, reference, coord, location)
    # nodes holds cell-1 .. cell+2 for every cell, so they are adjacent entries.
    i0 = np.searchsorted(nodes, cell - 1)
    s = x / _GRID_STEP_D - cell
    w_m1 = -s * (s - 1.0) * (s - 2.0) / 6.0
    w_0 = (s + 1.0) * (s - 1.0) * (s - 2.0) / 2.0
    w_1 = -(s + 1.0) * s * (s - 2.0) / 2.0
    w_2 = (s + 1.0) * s * (s - 1.0) / 6.0
    return (
        w_m1 * at_nodes[i0]
        + w_0 * at_nodes[i0 + 1]
        + w_1 * at_nodes[i0 + 2]
        + w_2 * at_nodes[i0 + 3]
    )


def to_bjd_tdb_mjd(
    values: ArrayLike,
    *,
    time_format: str,
    time_scale: str,
    time_reference: str,
    ra_deg: float,
    dec_deg: float,
    site: tuple[float, float, float] | None,
    met_epoch_mjd: float | None = None,
    met_unit_s: float = 1.0,
) -> FloatArray:
    """Convert uploaded times to MJD(TDB) at the solar-system barycentre (BJD_TDB - 2400000.5).

    BJD_TDB = t_TDB + n·r/c, the Roemer delay of the observer at position r
    (from the barycentre) towards the source direction n (Eastman, Siverd &
    Gaudi 2010, PASP 122, 935, eq. 2 without the Shapiro and time-dilation terms
    below a microsecond), computed with astropy ``Time.light_travel_time``.

    Parameters
    ----------
    values : array_like
        Times: floats, or ISO 8601 strings (``'YYYY-MM-DDThh:mm:ss[.fff]'``) for
        ``'isot'``. Any shape; non-finite values and instants outside
        :data:`PLAUSIBLE_MJD` give NaN (callers report them as row errors).
    time_format : str
        ``'mjd'``, ``'jd'``, ``'isot'``, ``'unix'`` (POSIX seconds, UTC only),
        ``'decimalyear'`` or ``'met'`` (seconds since ``met_epoch_mjd``).
    time_scale : str
        ``'utc'``, ``'tt'``, ``'tai'`` or ``'tdb'``.
    time_reference : str
        Where the times were taken: ``'TOPOCENTER'`` (at ``site``; a site of
        None is a space instrument, taken at the geocentre), ``'GEOCENTER'``,
        ``'HELIOCENTER'`` (HJD: the heliocentric delay is removed and the
        barycentric one added, both for the geocentre at the given time; the
        error of this approximation is a few tens of microseconds at most) or
        ``'BARYCENTER'`` (only the scale is converted).
    ra_deg, dec_deg : float
        Source position, ICRS, degrees.
    site : tuple of float or None
        Observatory (longitude deg, latitude deg, height m), geodetic WGS84.
    met_epoch_mjd : float, optional
        For ``'met'``: MJD of the zero of the mission clock, in ``time_scale``.
    met_unit_s : float
        For ``'met'``: seconds per unit of ``values`` (1 for seconds, 86400 for days).

    Returns
    -------
    ndarray of float64
        MJD in TDB at the barycentre, same shape as ``values``.

    Raises
    ------
    TimeConversionError
        Unknown format/scale/reference, missing MET epoch, bad position or
        site, unreadable ISO strings, or Unix times given in a scale other than UTC.

    Notes
    -----
    Fully vectorised through astropy ``Time`` arrays. Inputs much denser than
    1/64 day use the exact correction on that grid, interpolated (module notes).
    """
    fmt = _choice(time_format, TIME_FORMATS, "time_format", upper=False)
    scale = _choice(time_scale, TIME_SCALES, "time_scale", upper=False)
    reference = _choice(time_reference, TIME_REFERENCES, "time_reference", upper=True)
    if fmt == "unix" and scale != "utc":
        raise TimeConversionError(f"unix time counts UTC seconds; time_scale {scale} is not valid")
    if fmt == "met":
        if met_epoch_mjd is None:
            raise TimeConversionError("time_format met needs met_epoch_mjd (the clock's zero)")
        if not (math.isfinite(met_epoch_mjd) and math.isfinite(met_unit_s) and met_unit_s > 0):
            raise TimeConversionError(
                f"MET epoch {met_epoch_mjd!r} and unit {met_unit_s!r} s must be finite, unit > 0"
            )
    coord = None if reference == "BARYCENTER" else _sky_coord(ra_deg, dec_deg)
    location = _site_location(site) if reference == "TOPOCENTER" else None

    arr = np.asarray(values)
    flat = arr.ravel()
    out = np.full(flat.shape, np.nan)
    if flat.size == 0:
        return out.reshape(arr.shape)
    with _quiet_edges():
        times, ok = _input_times(flat, fmt, scale, met_epoch_mjd, met_unit_s)
        if times.size:
            tt = times.tt
            corr = _interpolated_correction_days(tt, reference, coord, location)
            out[ok] = (tt.jd1 - _MJD_ZERO_JD) + (tt.jd2 + corr)
    return out.reshape(arr.shape)


def light_travel_correction_s(
    mjd_tdb: ArrayLike,
    *,
    ra_deg: float,
    dec_deg: float,
    site: tuple[float, float, float] | None,
    kind: str = "barycentric",
) -> FloatArray:
    """Light travel time from the observer to the barycentre (or Sun) towards a source, seconds.

    The Roemer delay n·r/c with astropy's built-in ephemeris (astropy
    ``Time.light_travel_time``), exact per point: add it to a TDB time at the
    observer to get the barycentric (heliocentric) time.

    Parameters
    ----------
    mjd_tdb : array_like
        Times at the observer, MJD in TDB.
    ra_deg, dec_deg : float
        Source position, ICRS, degrees.
    site : tuple of float or None
        Observatory (longitude deg, latitude deg, height m); None = geocentre.
    kind : str
        ``'barycentric'`` or ``'heliocentric'``.

    Returns
    -------
    ndarray of float64
        Correction, seconds (NaN for non-finite input).
    """
    kind_key = _choice(kind, ("barycentric", "heliocentric"), "kind", upper=False)
    coord = _sky_coord(ra_deg, dec_deg)
    location = _site_location(site)
    mjd = np.asarray(mjd_tdb, dtype=np.float64)
    out = np.full(mjd.shape, np.nan)
    ok = np.isfinite(mjd)
    if ok.any():
        tdb = Time(mjd[ok], format="mjd", scale="tdb", location=location)
        with _quiet_edges():
            out[ok] = _light_time_days(tdb, coord, location, kind_key) * _SECONDS_PER_DAY
    return out


def mjd_tdb_to(mjd: ArrayLike, time_format: str) -> NDArray[Any]:
    """Express stored MJD(TDB) times as ``'mjd'``, ``'jd'`` or ``'isot'``.

    Parameters
    ----------
    mjd : array_like
        MJD in TDB.
    time_format : str
        ``'mjd'`` (a float copy), ``'jd'`` (JD = MJD + 2400000.5) or ``'isot'``
        (ISO 8601 strings in TDB, millisecond precision; '' for NaN).

    Returns
    -------
    ndarray
        float64 for mjd/jd, str for isot.
    """
    fmt = _choice(time_format, ("mjd", "jd", "isot"), "output time_format", upper=False)
    m = np.asarray(mjd, dtype=np.float64)
    if fmt == "mjd":
        return m.copy()
    ok = np.isfinite(m)
    t = Time(m[ok], format="mjd", scale="tdb")
    if fmt == "jd":
        out = np.full(m.shape, np.nan)
        out[ok] = t.jd
        return out
    text = np.asarray(t.isot, dtype=str)
    width = max(int(text.dtype.itemsize // 4), 1)
    strings = np.full(m.shape, "", dtype=f"<U{width}")
    strings[ok] = text
    return strings


# ---------------------------------------------------------------------------
# FITS time keywords (Rots et al. 2015, A&A 574, A36)
# ---------------------------------------------------------------------------

# TIMESYS values lcstore can convert; TDT, ET, IAT and GMT are the standard's
# deprecated synonyms of TT, TT, TAI and UTC (Rots et al. 2015 §4.1.1, from memory).
_FITS_TIMESYS: Final = {
    "UTC": "utc",
    "TT": "tt",
    "TAI": "tai",
    "TDB": "tdb",
    "TDT": "tt",
    "ET": "tt",
    "IAT": "tai",
    "GMT": "utc",
}
_FITS_REFPOS: Final = {
    "TOPOCENTER": "TOPOCENTER",
    "GEOCENTER": "GEOCENTER",
    "HELIOCENTER": "HELIOCENTER",
    "BARYCENTER": "BARYCENTER",
    # older TIMEREF values
    "LOCAL": "TOPOCENTER",
    "GEOCENTRIC": "GEOCENTER",
    "HELIOCENTRIC": "HELIOCENTER",
    "SOLARSYSTEM": "BARYCENTER",
}
_FITS_TIMEUNIT: Final = {"s": u.s, "d": u.day, "min": u.min, "h": u.h}


@dataclass(frozen=True)
class FitsTimeInfo:
    """Time metadata of a FITS table, read from its header.

    Attributes
    ----------
    time_scale : str
        One of :data:`TIME_SCALES` (from TIMESYS).
    time_reference : str
        One of :data:`TIME_REFERENCES` (from TREFPOS or TIMEREF).
    met_epoch_mjd : float
        Reference time (MJD, in ``time_scale``) that the time column counts from.
    met_unit_s : float
        Seconds per unit of the time column (from TIMEUNIT).
    time_zero : float
        TIMEZERO, in the column's unit: add it to the column before conversion.
    """

    time_scale: str
    time_reference: str
    met_epoch_mjd: float
    met_unit_s: float
    time_zero: float


def _number(header: Mapping[str, Any], key: str) -> float:
    value = header[key]
    if isinstance(value, bool):
        raise TimeConversionError(f"FITS keyword {key} = {value!r} is not a number")
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise TimeConversionError(f"FITS keyword {key} = {value!r} is not a number") from None
    if not math.isfinite(number):
        raise TimeConversionError(f"FITS keyword {key} = {value!r} is not finite")
    return number


def _text(header: Mapping[str, Any], key: str) -> str | None:
    value = header.get(key)
    if value is None:
        return None
    return str(value).strip().upper() or None


def _reference_mjd(h: Mapping[str, Any], scale: str) -> float:
    """MJDREFI+MJDREFF, else MJDREF, else JDREFI+JDREFF or JDREF, else DATEREF."""
    if "MJDREFI" in h or "MJDREFF" in h:
        mjdi = _number(h, "MJDREFI") if "MJDREFI" in h else 0.0
        mjdf = _number(h, "MJDREFF") if "MJDREFF" in h else 0.0
        return mjdi + mjdf
    if "MJDREF" in h:
        return _number(h, "MJDREF")
    if "JDREFI" in h or "JDREFF" in h:
        jdi = _number(h, "JDREFI") if "JDREFI" in h else 0.0
        jdf = _number(h, "JDREFF") if "JDREFF" in h else 0.0
        return (jdi - _MJD_ZERO_JD) + jdf
    if "JDREF" in h:
        return _number(h, "JDREF") - _MJD_ZERO_JD
    if "DATEREF" in h:
        text = str(h["DATEREF"]).strip()
        try:
            return float(Time(text, format="fits", scale=scale).mjd)
        except ValueError as exc:
            raise TimeConversionError(
                f"FITS keyword DATEREF = {text!r} is not a date ({exc})"
            ) from None
    raise TimeConversionError(
        "FITS header has no reference time (MJDREFI/MJDREFF, MJDREF, JDREF or DATEREF)"
    )


def fits_time_info(header: Mapping[str, Any]) -> FitsTimeInfo:
    """Read the time keywords of a FITS header (Rots et al. 2015, A&A 574, A36).

    * TIMESYS (default UTC): UTC, TT, TAI, TDB (and deprecated synonyms TDT,
      ET, IAT, GMT), any case, padding ignored; other scales are refused.
    * Reference time: MJDREFI + MJDREFF (the pair wins; a missing half is 0),
      else MJDREF, else JDREFI + JDREFF or JDREF (minus 2400000.5), else
      DATEREF (ISO 8601), all in the TIMESYS scale; none of them is an error.
    * TIMEUNIT (default s): s, d, min or h.
    * TIMEZERO (default 0), in TIMEUNIT, to be added to the time column.
    * TREFPOS (default TOPOCENTER), else the older TIMEREF (LOCAL,
      GEOCENTRIC, HELIOCENTRIC, SOLARSYSTEM).

    Astropy's own FITS time reader is not used because it ignores MJDREFI /
    MJDREFF and TIMEREF.

    Parameters
    ----------
    header : Mapping
        An astropy ``Header`` or any mapping of keyword to value (keys in any case).

    Returns
    -------
    FitsTimeInfo
        Arguments for :func:`to_bjd_tdb_mjd` with ``time_format='met'``.

    Raises
    ------
    TimeConversionError
        Unsupported TIMESYS, TIMEUNIT or reference position, or no reference time.
    """
    h = {str(k).strip().upper(): v for k, v in header.items()}
    sys_text = _text(h, "TIMESYS") or "UTC"
    if sys_text not in _FITS_TIMESYS:
        raise TimeConversionError(
            f"FITS TIMESYS {sys_text!r} is not supported (use UTC, TT, TAI or TDB)"
        )
    scale = _FITS_TIMESYS[sys_text]
    epoch = _reference_mjd(h, scale)

    unit_text = str(h.get("TIMEUNIT", "s")).strip() or "s"
    unit = _FITS_TIMEUNIT.get(unit_text.lower())
    if unit is None:
        raise TimeConversionError(
            f"FITS TIMEUNIT {unit_text!r} is not supported (use s, d, min or h)"
        )
    time_zero = _number(h, "TIMEZERO") if "TIMEZERO" in h else 0.0

    key = "TREFPOS" if _text(h, "TREFPOS") else "TIMEREF"
    ref_text = _text(h, key) or "TOPOCENTER"
    if ref_text not in _FITS_REFPOS:
        raise TimeConversionError(
            f"FITS {key} {ref_text!r} is not supported "
            "(use TOPOCENTER, GEOCENTER, HELIOCENTER or BARYCENTER)"
        )
    return FitsTimeInfo(
        time_scale=scale,
        time_reference=_FITS_REFPOS[ref_text],
        met_epoch_mjd=float(epoch),
        met_unit_s=float(unit.to(u.s)),
        time_zero=time_zero,
    )
