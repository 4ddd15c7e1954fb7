"""Time stamps of light-curve points: conversion to BJD_TDB and the FITS time keywords.

lcstore stores every time as MJD in the TDB scale at the solar-system
barycentre, BJD_TDB - 2400000.5 (Eastman, Siverd & Gaudi 2010, PASP 122,
935). :func:`to_bjd_tdb_mjd` takes times as uploaded, in any of
:data:`TIME_FORMATS`, :data:`TIME_SCALES` and :data:`TIME_REFERENCES` (the
reference-position words of the FITS time standard, Rots et al. 2015, A&A
574, A36), and does the conversion with astropy:

* time scales with ``astropy.time.Time`` (leap seconds from astropy's table,
  TDB - TT from ``erfa.dtdb`` with the observer's position);
* the Roemer delay to the barycentre as astropy ``Time.light_travel_time``
  computes it (astropy's built-in ephemeris ``erfa.epv00``, good to a few
  microseconds), for the observing site or the geocentre.

Astropy never reaches for the network from this module: the IERS
auto-download is switched off at import.

Whole columns, no loop over points. BJD_TDB - t is written as
``S(t) + P0(t) + P1(t) cos θ + P2(t) sin θ + P3(t) cos 2θ + P4(t) sin 2θ``,
θ the Earth rotation angle: S (TDB - TT at the geocentre and the Earth's
position towards the source) and P0..P4 (the site's rotating position, the
aberration astropy applies to it, the topocentric part of TDB - TT) vary on
scales of days. They are computed exactly, with astropy and erfa, on grids
(the precession-nutation matrix and the TDB - TT series every 2 days,
interpolated to daily nodes with 8-point Lagrange polynomials; the Earth's
position every day, 10-point; the rotation coefficients and t - UT1 every
day, linear), and the rotation itself per point in numpy (ERA from UT1).
Against astropy's per-point ``light_travel_time`` the light time agrees to
about 1 ns (tests/science/test_times.py, random instants over ten years);
the stored float64 MJD resolves 0.6 µs. Days where t - UT1 steps (UTC
before 1973) and inputs too sparse for a grid are computed point by point
with the same formulas. UTC is turned into TT with astropy once per day
(and per point on leap-second days and before 1972). Times already in TDB at
the barycentre are not converted at all.

Epochs at the edges of :data:`PLAUSIBLE_MJD`: outside astropy's bundled
Earth-orientation table, astropy holds UT1 - UTC at the table's last value
and takes a mean pole (they move a site's light time by at most ~2 µs), and
outside the era of the leap-second table erfa uses its own approximation of
TAI - UTC. Both are converted silently here (erfa's "dubious year" and
astropy's IERS-range warnings are filtered during the conversion); the
caller's validation owns the plausibility of the epochs.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Final

import astropy.units as u
import erfa
import numpy as np
from astropy import constants
from astropy.coordinates import EarthLocation, SkyCoord, UnitSphericalRepresentation

# The polar motion astropy's own ITRS <-> CIRS transform uses (IERS table, with
# astropy's mean pole outside it), so the site term matches light_travel_time.
from astropy.coordinates.builtin_frames.utils import get_polar_motion
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
    "tables_preload",
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
_C_M_S: Final = float(constants.c.to_value(u.m / u.s))
_TT_MINUS_TAI_D: Final = 32.184 / _SECONDS_PER_DAY  # IAU 1991 definition of TT
_AU_M: Final = float(u.au.to(u.m))

# Grids of the smooth terms of BJD_TDB - t (module notes): the slow terms
# (TDB - TT series, precession-nutation matrix) every 2 days, the Earth term and
# the Earth-rotation coefficients every day; and the bend of t - UT1 between
# neighbouring days above which a day is computed point by point.
_SLOW_STEP_D: Final = 2.0
_FAST_STEP_D: Final = 1.0
_UT1_KINK_S: Final = 1e-3
_EARTH_POINTS: Final = 10
_SLOW_POINTS: Final = 8


class TimeConversionError(ValueError):
    """Times cannot be converted (unknown format, scale or reference, missing epoch, ...)."""


def tables_preload() -> None:
    """Parse astropy's leap-second and Earth-orientation tables now, not at the first upload.

    astropy reads them on first use in each process (2.5-4 s measured here); a web
    worker calls this once at start (lcstore/wsgi.py) so no request pays for it.
    """
    t = Time([60000.0, 60001.0], format="mjd", scale="utc")
    _ = t.tdb, t.ut1


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


@dataclass(frozen=True)
class _Instants:
    """Instants as a two-part Julian date in one time scale, without astropy's bookkeeping."""

    jd1: FloatArray
    jd2: FloatArray
    scale: str

    @classmethod
    def of(cls, t: Time) -> _Instants:
        return cls(
            np.asarray(t.jd1, dtype=np.float64), np.asarray(t.jd2, dtype=np.float64), t.scale
        )

    @property
    def size(self) -> int:
        return int(self.jd2.size)

    @property
    def mjd(self) -> FloatArray:
        return (self.jd1 - _MJD_ZERO_JD) + self.jd2

    def time(self, select: NDArray[np.bool_] | None = None) -> Time:
        if select is None:
            return Time(self.jd1, self.jd2, format="jd", scale=self.scale)
        return Time(self.jd1[select], self.jd2[select], format="jd", scale=self.scale)


def _input_times(
    flat: NDArray[Any], fmt: str, scale: str, met_epoch_mjd: float | None, met_unit_s: float
) -> tuple[_Instants, NDArray[np.bool_]]:
    """The plausible entries of ``flat`` as instants in ``scale``, and the mask that selects them.

    MJD and JD numbers are taken as they are (MJD as the pair 2400000.5 + MJD),
    which is what astropy's Time would hold; the other formats go through
    astropy Time.
    """
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
        return _Instants.of(t[ok]), ok
    try:
        v = flat.astype(np.float64)
    except (TypeError, ValueError):
        raise TimeConversionError(f"time_format {fmt} needs numbers") from None
    ok = _in_range(_approx_mjd(v, fmt, met_epoch_mjd, met_unit_s))
    v = v[ok]
    if fmt == "mjd":
        return _Instants(np.full(v.size, _MJD_ZERO_JD), v, scale), ok
    if fmt == "jd":
        return _Instants(v, np.zeros(v.size), scale), ok
    if fmt == "met":
        assert met_epoch_mjd is not None
        # Elapsed SI seconds from an epoch in the given scale; for UTC astropy
        # adds them in TAI, so leap seconds inside the interval are counted.
        epoch = Time(met_epoch_mjd, format="mjd", scale=scale)
        return _Instants.of(epoch + TimeDelta(v * met_unit_s, format="sec")), ok
    return _Instants.of(Time(v, format=fmt, scale=scale)), ok


def _as_tt(times: _Instants) -> _Instants:
    """The instants in TT.

    TAI: TT = TAI + 32.184 s. UTC: TT - UTC is computed with astropy once per
    UTC day at noon; on a day where it equals the next day's value (no leap
    second at the day's end, no drifting pre-1972 UTC) it holds for the whole
    day (erfa's UTC -> TAI adds TAI - UTC of the date), and is added to the
    instants of that day away from its midnights. Every other instant is
    converted by astropy itself.
    """
    if times.scale == "tt":
        return times
    if times.scale == "tai":
        return _Instants(times.jd1, times.jd2 + _TT_MINUS_TAI_D, "tt")
    if times.scale != "utc":
        return _Instants.of(times.time().tt)
    mjd = times.mjd
    day = np.floor(mjd)
    if times.size < 64 or day.max() - day.min() > times.size:
        return _Instants.of(times.time().tt)
    first = day.min()
    days = np.arange(first, day.max() + 2.0)
    noon = Time(days + 0.5, format="mjd", scale="utc").tt
    offset = ((noon.jd1 - _MJD_ZERO_JD) - (days + 0.5)) + noon.jd2  # TT - UTC, days
    steady = np.abs(np.diff(offset)) < 1e-12
    index = (day - first).astype(np.int64)
    within = mjd - day
    simple = steady[index] & (within > 1e-8) & (within < 1.0 - 1e-8)
    jd1 = times.jd1.copy()
    jd2 = times.jd2 + offset[index]
    if not simple.all():
        other = times.time(~simple).tt
        jd1[~simple] = other.jd1
        jd2[~simple] = other.jd2
    return _Instants(jd1, jd2, "tt")


# ---------------------------------------------------------------------------
# Corrections: TDB - TT and the Roemer delay on whole columns
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _Observer:
    """What BJD_TDB - t depends on besides the instant t.

    ``earth`` names the vector whose projection on the source direction is the
    delay: the Earth's barycentric or heliocentric position, or ``"sun"`` (the
    Sun's barycentric position, for heliocentric input); None for no delay
    (barycentric input). ``site`` is the observatory's ITRS position in metres
    (None: the geocentre).
    """

    direction: FloatArray
    earth: str | None
    site: FloatArray | None = None
    lon_rad: float = 0.0
    rxy_km: float = 0.0
    z_km: float = 0.0


def _observer(
    coord: SkyCoord | None, earth: str | None, location: EarthLocation | None
) -> _Observer:
    direction = (
        np.zeros(3)
        if coord is None
        else np.asarray(
            coord.icrs.represent_as(UnitSphericalRepresentation).to_cartesian().xyz.value,
            dtype=np.float64,
        )
    )
    if location is None:
        return _Observer(direction, earth)
    site = np.array([location.x.to_value(u.m), location.y.to_value(u.m), location.z.to_value(u.m)])
    return _Observer(
        direction,
        earth,
        site,
        lon_rad=float(location.lon.to_value(u.rad)),
        rxy_km=float(np.hypot(site[0], site[1]) / 1e3),
        z_km=float(site[2] / 1e3),
    )


def _slow_columns(t: Time, obs: _Observer) -> FloatArray:
    """Slowly varying terms at the instants ``t`` (TT or TDB), one row each.

    For TT instants: TDB - TT at the geocentre (``erfa.dtdb``, as astropy's
    ``Time.tdb``) and, with a site, the three coefficients of the topocentric
    part of ``erfa.dtdb`` (constant, sin and cos of the local solar time: the
    part is linear in the site's distances from the axis and the equator and a
    sinusoid of the solar time, so three calls at solar times 0, 6 h and 12 h
    give it exactly). With a site: the nine elements of the
    celestial-to-intermediate matrix ``erfa.c2i06a``, as astropy's ITRS <-> GCRS
    transform uses.
    """
    rows: list[FloatArray] = []
    tt = t if t.scale == "tt" else t.tt
    if t.scale == "tt":
        geo = erfa.dtdb(tt.jd1, tt.jd2, 0.0, 0.0, 0.0, 0.0)
        rows.append(geo)
        if obs.site is not None:
            ut0 = (-obs.lon_rad / (2.0 * math.pi)) % 1.0  # local solar time 0 h
            f0, f6, f12 = (
                erfa.dtdb(tt.jd1, tt.jd2, (ut0 + q) % 1.0, obs.lon_rad, obs.rxy_km, obs.z_km) - geo
                for q in (0.0, 0.25, 0.5)
            )
            const = 0.5 * (f0 + f12)
            rows += [const, f6 - const, 0.5 * (f0 - f12)]
    if obs.site is not None:
        c2i = erfa.c2i06a(tt.jd1, tt.jd2).reshape(-1, 9)
        rows += list(c2i.T)
    if not rows:
        return np.zeros((0, np.size(t.jd1)))
    return np.vstack([np.atleast_1d(r) for r in rows])


def _fast_columns(t: Time, slow: FloatArray, obs: _Observer) -> FloatArray:
    """BJD_TDB - t (seconds) at the instants ``t`` as smooth coefficients of the Earth's rotation.

    The result at an instant with Earth rotation angle θ is
    ``S + P0 + P1 cos θ + P2 sin θ + P3 cos 2θ + P4 sin 2θ`` (see
    :func:`_combine`). Rows: S (geocentric TDB - TT and the Earth term n·E/c,
    which carries the annual and monthly motion) and, with a site, P0..P4 and
    t - UT1 in seconds. Every row is smooth on a scale of days, apart from t -
    UT1 where the Earth-orientation table jumps (before 1973 and at its ends).

    The site term follows astropy ``Time.light_travel_time`` for a location:
    the ITRS position is turned to GCRS with polar motion (astropy's IERS
    table), the Earth rotation angle and ``erfa.c2i06a``, then to ICRS by
    astropy's GCRS -> ICRS transform, which removes the annual aberration from
    the direction of the geocentric vector (its ``aticq``) before adding the
    Earth's position. That aberration term, up to |r| v/c ≈ 2.1 µs, is kept
    here to first order in v/c (the second order is below 1 ns). The Sun's
    light deflection that ``aticq`` also removes is left out: for a vector from
    the geocentre it is below 1e-8 rad, under 0.3 ns of light time.
    """
    n = obs.direction
    size = np.size(t.jd1)
    s0 = np.zeros(size)
    tdb1, tdb2 = t.jd1, t.jd2
    with_dtdb = t.scale == "tt"
    if with_dtdb:
        s0 = s0 + slow[0]
        tdb2 = tdb2 + slow[0] / _SECONDS_PER_DAY
    if obs.earth is None and obs.site is None:
        return s0[np.newaxis, :]
    # astropy's 'builtin' ephemeris is erfa.epv00 at TDB (au, au/day).
    helio, bary = erfa.epv00(tdb1, tdb2)
    if obs.earth is not None:
        vector = {
            "barycentric": bary["p"],
            "heliocentric": helio["p"],
            "sun": bary["p"] - helio["p"],
        }[obs.earth]
        s0 = s0 + (vector @ n) * (_AU_M / _C_M_S)
    if obs.site is None:
        return s0[np.newaxis, :]

    site = obs.site
    r_norm = float(np.linalg.norm(site))
    v = bary["v"] * (_AU_M / _SECONDS_PER_DAY / _C_M_S)  # Earth's barycentric velocity / c
    tt = t if t.scale == "tt" else t.tt
    ut1 = tt.ut1
    dut = ((t.jd1 - ut1.jd1) + (t.jd2 - ut1.jd2)) * _SECONDS_PER_DAY  # t - UT1, s
    xp, yp = get_polar_motion(tt)
    pom = erfa.pom00(xp, yp, erfa.sp00(tt.jd1, tt.jd2))
    p = np.einsum("kji,j->ki", pom, site)  # terrestrial intermediate position, m
    c2i = slow[-9:].T.reshape(-1, 3, 3)
    m = np.einsum("kij,j->ki", c2i, n)  # source direction, intermediate frame
    mv = np.einsum("kij,kj->ki", c2i, v)
    # GCRS site = c2i^T R3(-θ) p: n·r = a1 cos θ + a2 sin θ + a3 (s), r·v likewise (m).
    a1 = (m[:, 0] * p[:, 0] + m[:, 1] * p[:, 1]) / _C_M_S
    a2 = (m[:, 1] * p[:, 0] - m[:, 0] * p[:, 1]) / _C_M_S
    a3 = m[:, 2] * p[:, 2] / _C_M_S
    b1 = mv[:, 0] * p[:, 0] + mv[:, 1] * p[:, 1]
    b2 = mv[:, 1] * p[:, 0] - mv[:, 0] * p[:, 1]
    b3 = mv[:, 2] * p[:, 2]
    # Aberration of the site vector's direction (first order):
    # -(|r| n·v - (r·v)(n·r)/|r|)/c, the product expanded in harmonics of θ.
    p0 = a3 - r_norm * (v @ n) / _C_M_S + (0.5 * (b1 * a1 + b2 * a2) + b3 * a3) / r_norm
    p1 = a1 + (b1 * a3 + b3 * a1) / r_norm
    p2 = a2 + (b2 * a3 + b3 * a2) / r_norm
    p3 = 0.5 * (b1 * a1 - b2 * a2) / r_norm
    p4 = 0.5 * (b1 * a2 + b2 * a1) / r_norm
    if with_dtdb:
        # Topocentric TDB - TT: c + A sin τ + B cos τ with τ the local solar time
        # (astropy: UTC fraction of the day) = θ + φ, φ slowly varying.
        const, sin_c, cos_c = slow[1], slow[2], slow[3]
        j1, j2 = erfa.taiutc(*erfa.tttai(tt.jd1, tt.jd2))
        day_fraction = ((j1 - 0.5) % 1.0 + j2) % 1.0
        phi = 2.0 * math.pi * day_fraction + obs.lon_rad - erfa.era00(ut1.jd1, ut1.jd2)
        cos_phi, sin_phi = np.cos(phi), np.sin(phi)
        p0 = p0 + const
        p1 = p1 + sin_c * sin_phi + cos_c * cos_phi
        p2 = p2 + sin_c * cos_phi - cos_c * sin_phi
    return np.vstack([s0, p0, p1, p2, p3, p4, dut])


def _earth_rotation_angle(mjd_ut1: FloatArray) -> FloatArray:
    """ERA (rad) of UT1 given as MJD: IERS Conventions (2010) eq. 5.15, as erfa.era00."""
    jd_part = mjd_ut1 + 0.5
    turns = 0.00273781191135448 * (mjd_ut1 - 51544.5)
    turns += jd_part - np.floor(jd_part)  # fraction of the UT1 Julian day
    turns += 0.7790572732640
    turns -= np.floor(turns)
    turns *= 2.0 * math.pi
    return turns


def _combine(cols: FloatArray, x_mjd: FloatArray) -> FloatArray:
    """BJD_TDB - t (seconds) from the rows of :func:`_fast_columns` at MJD ``x_mjd`` (t's scale)."""
    if cols.shape[0] == 1:
        return np.asarray(cols[0], dtype=np.float64)
    s0, p0, p1, p2, p3, p4, dut = cols
    theta = _earth_rotation_angle(x_mjd - dut / _SECONDS_PER_DAY)
    c, s = np.cos(theta), np.sin(theta)
    out = s0 + p0
    out += p1 * c
    out += p2 * s
    c2 = c * c  # cos 2θ = 2c² - 1, sin 2θ = 2sc
    c2 *= 2.0
    c2 -= 1.0
    out += p3 * c2
    s *= c
    s *= 2.0
    out += p4 * s
    return out


def _cell_polynomials(values: FloatArray, offsets: NDArray[np.int64]) -> FloatArray:
    """Power-series coefficients in s of the Lagrange polynomial through each stencil.

    ``values`` (rows, nodes); the stencil starting at node i holds nodes
    i .. i + k - 1 at the grid offsets ``offsets`` (k of them) from the cell's
    first node, s in [0, 1) within the cell. Returns (k, rows, nodes - k + 1):
    coefficient m of s**m for the stencil starting at each node.
    """
    k = offsets.size
    vander = np.vander(offsets.astype(np.float64), k, increasing=True)
    to_coef = np.linalg.inv(vander)  # coefficients = V^-1 @ stencil values
    m = values.shape[1] - k + 1
    coef = np.zeros((k, values.shape[0], max(m, 0)))
    for j in range(k):
        window = values[:, j : j + m]
        for power in range(k):
            coef[power] += to_coef[power, j] * window
    return coef


def _grid(x: FloatArray, offsets: NDArray[np.int64]) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
    """Grid nodes needed by the cells of ``x`` (grid units) and each x's first stencil node index."""
    cell = np.floor(x).astype(np.int64)
    lo, hi = int(cell.min()) + int(offsets[0]), int(cell.max()) + int(offsets[-1])
    if hi - lo <= 4 * x.size + 1024:
        needed = np.zeros(hi - lo + 1, dtype=bool)
        present = np.zeros(hi - lo + 1, dtype=bool)
        present[cell - lo] = True
        for o in offsets:
            needed[max(o, 0) : needed.size + min(o, 0)] |= present[
                max(-o, 0) : present.size + min(-o, 0)
            ]
        nodes = np.flatnonzero(needed) + lo
        index = np.cumsum(needed) - 1
        return nodes, index[cell + int(offsets[0]) - lo]
    cells = np.unique(cell)
    nodes = np.unique((cells[:, np.newaxis] + offsets[np.newaxis, :]).ravel())
    return nodes, np.searchsorted(nodes, cell + offsets[0])


def _on_grid(
    func: Callable[[Time], FloatArray],
    t: _Instants,
    step_d: float,
    points: int | Sequence[int],
    rough: Callable[[NDArray[np.int64], FloatArray], NDArray[np.bool_]] | None = None,
) -> FloatArray:
    """Rows of ``func`` at the instants ``t``: on a grid of ``step_d`` days and interpolated.

    Row i is interpolated with a ``points[i]``-point Lagrange polynomial on the
    grid nodes around each instant (2 is linear), evaluated per instant from
    the polynomial's coefficients in its grid cell. Where the grid would need as
    many nodes as there are instants, ``func`` is evaluated at the instants
    themselves. ``rough(nodes, values)`` flags nodes whose neighbourhood is not
    smooth; instants in a grid cell bounded by a flagged node are evaluated
    directly.
    """
    x = t.mjd / step_d
    widest = points if isinstance(points, int) else max(points)
    offsets = np.arange(1 - widest // 2, widest // 2 + 1, dtype=np.int64)
    if x.size < widest:
        return func(t.time())
    nodes, first = _grid(x, offsets)
    if nodes.size >= x.size:
        return func(t.time())
    values = func(Time(nodes * step_d, format="mjd", scale=t.scale))
    if isinstance(points, int):
        points = (points,) * values.shape[0]
    s = x - np.floor(x)
    out = np.empty((values.shape[0], x.size))
    for k in sorted(set(points)):
        rows = [i for i, p in enumerate(points) if p == k]
        own = np.arange(1 - k // 2, k // 2 + 1, dtype=np.int64)
        coef = _cell_polynomials(values[rows], own)
        start = first + int(own[0] - offsets[0])  # stencil start of each instant
        for i, row in enumerate(rows):
            acc = np.take(coef[k - 1, i], start)  # Horner in s
            for power in range(k - 2, -1, -1):
                acc *= s
                acc += np.take(coef[power, i], start)
            out[row] = acc
    if rough is not None:
        flagged = rough(nodes, values)
        if flagged.any():
            cell_start = first - int(offsets[0])
            redo = flagged[cell_start] | flagged[cell_start + 1]
            if redo.any():
                out[:, redo] = func(t.time(redo))
    return out


def _ut1_kinks(nodes: NDArray[np.int64], values: FloatArray) -> NDArray[np.bool_]:
    """Nodes where t - UT1 bends by more than 1 ms between neighbouring days.

    t - UT1 follows the Earth-orientation table, which is smooth inside its
    range (second differences below 2 ms found from 1973 on) but steps with
    UTC before 1973, where astropy holds UT1 - UTC at the table's first value.
    """
    dut = values[-1]
    flagged = np.zeros(nodes.size, dtype=bool)
    if nodes.size >= 3:
        second = dut[2:] - 2.0 * dut[1:-1] + dut[:-2]
        consecutive = (nodes[2:] - nodes[:-2]) == 2
        flagged[1:-1] = consecutive & (np.abs(second) > _UT1_KINK_S)
    return flagged


def _correction_days(t: _Instants, obs: _Observer) -> FloatArray:
    """BJD_TDB - t in days at the instants ``t`` (TT: with TDB - TT; TDB: the delay only).

    Smooth terms on a grid (module notes): the slow ones on 2-day nodes (8-point
    Lagrange), the Earth term on 1-day nodes (8-point), the coefficients of the
    Earth's rotation on 1-day nodes (linear); the rotation itself per point.
    """

    def fast(tn: Time) -> FloatArray:
        slow = _on_grid(
            lambda ts: _slow_columns(ts, obs), _Instants.of(tn), _SLOW_STEP_D, _SLOW_POINTS
        )
        return _fast_columns(tn, slow, obs)

    if obs.site is None:
        cols = _on_grid(fast, t, _FAST_STEP_D, (_EARTH_POINTS,))
    else:
        cols = _on_grid(fast, t, _FAST_STEP_D, (_EARTH_POINTS,) + (2,) * 6, rough=_ut1_kinks)
    return _combine(cols, t.mjd) / _SECONDS_PER_DAY


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
    Whole columns at once: exact smooth terms on coarse grids, interpolated,
    and the Earth's rotation per point (module notes); about 1 ns from
    astropy's per-point result.
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
    earth = {"BARYCENTER": None, "HELIOCENTER": "sun"}.get(reference, "barycentric")

    arr = np.asarray(values)
    flat = arr.ravel()
    out = np.full(flat.shape, np.nan)
    if flat.size == 0:
        return out.reshape(arr.shape)
    with _quiet_edges():
        times, ok = _input_times(flat, fmt, scale, met_epoch_mjd, met_unit_s)
        if times.size:
            if scale == "tdb" and earth is None:
                # Already BJD_TDB: nothing to convert.
                out[ok] = times.mjd
            else:
                t = times if scale == "tdb" else _as_tt(times)
                corr = _correction_days(t, _observer(coord, earth, location))
                out[ok] = (t.jd1 - _MJD_ZERO_JD) + (t.jd2 + corr)
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

    The Roemer delay n·r/c as astropy ``Time.light_travel_time`` computes it
    with its built-in ephemeris (within ~1 ns; module notes): add it to a TDB
    time at the observer to get the barycentric (heliocentric) time.

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
        tdb = _Instants(np.full(int(ok.sum()), _MJD_ZERO_JD), mjd[ok], "tdb")
        with _quiet_edges():
            days = _correction_days(tdb, _observer(coord, kind_key, location))
        out[ok] = days * _SECONDS_PER_DAY
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
