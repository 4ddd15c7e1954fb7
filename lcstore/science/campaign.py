"""The invented demonstration campaign: a seeded simulation written as contributors' files.

Everything here is fiction: the consortium, its three ground telescopes, the
X-ray and gamma-ray missions, the three blazars and the people. The physical
model is stated once, in :data:`SOURCES` and :func:`build_campaign`, and the
injected truth is written into the manifest (``campaign.json``) so that the
service's correlation, lag and variability answers can be checked against it.

Model (all times in the model are BJD_TDB, as MJD)
--------------------------------------------------
* Intrinsic R-band flux density: ``log10 F_R(t) = log10 F_R0 + s·x(t)`` where
  ``x`` is red noise with power spectrum ``P(f) ∝ f^-β`` simulated by the
  method of Timmer & König (1995, A&A 300, 707; :func:`lcstore.science.simulate.red_noise`)
  on a 0.1-day grid, scaled to zero mean and unit variance.
* Optical/near-IR colours: a power law ``F_ν ∝ ν^-α`` at all times, so that
  ``F_band = F_R (λ_band/λ_R)^α``; Galactic extinction ``A_λ`` from the
  source's E(B−V) with the law of Cardelli, Clayton & Mathis (1989, ApJ 345,
  245; R_V = 3.1, via ``extinction.ccm89``) at each band's effective
  wavelength; Vega magnitudes with the zero points of Bessell, Castelli & Plez
  (1998, A&A 333, 231, Table A2).
* Gamma-ray photon flux: ``F_γ(t) = F_γ0 (F_R(t − τ_γ)/F_R0)^q_γ``, i.e. a
  flux–flux power law of index ``q_γ`` with a delay ``τ_γ``; X-ray count rate
  likewise with ``q_X`` and ``τ_X``. Sign convention (DESIGN §4): a positive
  lag means the band (y) lags the R band (x); ``τ < 0`` means it leads.
* Optical sampling: one visit per clear night when the source stands more than
  25° high within 5 h of local midnight (so each source has a seasonal gap of
  three to four months), with weather as a thresholded AR(1) sequence per
  site; times are JD (or MJD) UTC at the telescope (topocentric). Each
  telescope has a small multiplicative calibration bias per band, undone by the
  curated calibration factor (``factor = 1/bias``).
* Gamma-ray sampling: contiguous bins (1, 3 or 7 days) with one 12-day gap; the
  bin's true flux is the model averaged over the bin; the measurement error is
  the Gaussian approximation to Poisson counting, ``σ = √(N_src + N_bkg)/E`` for
  an exposure ``E`` per day and a background ``N_bkg`` per day; the test
  statistic is ``TS = (F/σ)²`` and a bin with TS < 4 is reported as a 95 %
  upper limit ``max(F, 0) + 1.645 σ`` (the common rule of thumb, REFERENCES §7).
  Times are mission elapsed seconds (TT, geocentre) since the mission epoch.
* X-ray sampling: pointed snapshots (0.8–2 ks) on about one day in three while
  the Sun is more than 46° away, plus a daily three-week campaign; counts are
  Poisson; times are MJD TT (geocentre) at mid-exposure.

Run ``python -m lcstore.science.campaign fixtures/`` to write the files; the
same seed gives the same bytes.
"""

from __future__ import annotations

import argparse
import functools
import io
import json
import sys
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import astropy.units as u
import extinction
import numpy as np
import numpy.typing as npt
from astropy.coordinates import EarthLocation, get_body_barycentric
from astropy.io import fits, votable
from astropy.io.votable import tree
from astropy.table import Table
from astropy.time import Time
from astropy.utils import iers
from scipy import interpolate, signal, special

from lcstore.science.simulate import red_noise

iers.conf.auto_download = False
iers.conf.auto_max_age = None

__all__ = [
    "CAMPAIGN_SEED",
    "CAMPAIGN_START_MJD",
    "CAMPAIGN_END_MJD",
    "GRID_STEP_DAYS",
    "MET_EPOCH_MJD_TT",
    "Campaign",
    "Dataset",
    "ModelCurves",
    "bjd_tdb",
    "build_campaign",
    "campaign_files",
    "main",
    "solar_elongation",
    "source_altitude",
    "write_campaign",
]

FloatArray = npt.NDArray[np.float64]

# (A seed whose binary FITS tables happen not to spell any real facility acronym.)
CAMPAIGN_SEED = 20230420
#: First and last night of the campaign (MJD; 2021-03-24 to 2023-09-10).
CAMPAIGN_START_MJD = 59300.0
CAMPAIGN_END_MJD = 60200.0
#: Step of the model grid (days).
GRID_STEP_DAYS = 0.1
_GRID_MARGIN_DAYS = 60.0

#: The gamma-ray mission's clock counts SI seconds (TT) from 2010-01-01T00:00:00 UTC,
#: which is TT = UTC + 34 s + 32.184 s on that date: MJD 55197 + 66.184 s.
MET_EPOCH_MJDREFI = 55197
MET_EPOCH_MJDREFF = 66.184 / 86400.0
MET_EPOCH_MJD_TT = MET_EPOCH_MJDREFI + MET_EPOCH_MJDREFF

CONSORTIUM = {
    "name": "Lantern Blazar Monitoring Collaboration",
    "acronym": "LBMC",
    "description": (
        "An invented collaboration that watches three invented blazars from three "
        "invented ground observatories and two invented space missions. Every name, "
        "place and number in this campaign is fiction, simulated from the model in "
        "'truth'."
    ),
}

# name, λ_eff (Å), zero point (Jy): Bessell, Castelli & Plez (1998) Table A2 (REFERENCES §1).
OPTICAL_BANDS: dict[str, tuple[str, float, float]] = {
    "B": ("Johnson B (Vega)", 4380.0, 4063.0),
    "V": ("Johnson V (Vega)", 5450.0, 3636.0),
    "R": ("Cousins R (Vega)", 6410.0, 3064.0),
    "J": ("J (Vega)", 12200.0, 1589.0),
}
GAMMA_BAND = "gamma-100mev-300gev"
XRAY_BAND = "xray-300ev-10kev"
GAMMA_PHOTON_INDEX = 2.2
XRAY_PHOTON_INDEX = 2.0
#: Energy flux (0.3–10 keV, erg cm⁻² s⁻¹) of one count per second for the X-ray
#: telescope and a photon index of 2 (an invented calibration).
XRAY_COUNTS_TO_ENERGY_FLUX = 3.9e-11
#: Gamma-ray exposure (cm² s) and background photons within the source region, per day.
GAMMA_EXPOSURE_PER_DAY = 1.4e8
GAMMA_BACKGROUND_PER_DAY = 150.0
GAMMA_TS_LIMIT = 4.0
GAMMA_UL_SIGMA = 1.645  # one-sided 95 %
GAMMA_SAFE_MODE = (59870.0, 59882.0)  # MJD TT with no gamma-ray data


@dataclass(frozen=True)
class _Site:
    slug: str
    name: str
    lon: float
    lat: float
    height: float
    clear_fraction: float
    bands: tuple[str, ...]
    error_floor: float  # magnitudes
    error_at_16: float  # photon-noise error of a 16th-magnitude star
    bias: dict[str, float]  # observed flux / true flux per band


SITES: tuple[_Site, ...] = (
    _Site(
        slug="velmora-13",
        name="Velmora Ridge Observatory 1.3 m",
        lon=-109.284,
        lat=32.917,
        height=2410.0,
        clear_fraction=0.62,
        bands=("B", "V", "R"),
        error_floor=0.006,
        error_at_16=0.010,
        bias={"B": 1.0, "V": 1.0, "R": 1.0},  # the reference photometry
    ),
    _Site(
        slug="tarsk-08",
        name="Tarsk Plateau Station 0.8 m",
        lon=23.716,
        lat=38.212,
        height=1385.0,
        clear_fraction=0.55,
        bands=("V", "R"),
        error_floor=0.008,
        error_at_16=0.022,
        bias={"V": 1 / 0.97, "R": 1 / 0.96},
    ),
    _Site(
        slug="oruna-20",
        name="Oruna Hills Observatory 2.0 m",
        lon=-68.531,
        lat=-24.486,
        height=2655.0,
        clear_fraction=0.50,
        bands=("B", "V", "R", "J"),
        error_floor=0.005,
        error_at_16=0.007,
        bias={"B": 1 / 1.03, "V": 1 / 1.02, "R": 1 / 1.025, "J": 1.0},
    ),
)

SPACE = {
    "xray": {
        "slug": "kite-xrt",
        "name": "Kite X-ray Telescope (invented mission)",
    },
    "gamma": {
        "slug": "skylark-gst",
        "name": "Skylark Gamma-ray Survey Telescope (invented mission)",
    },
}


@dataclass(frozen=True)
class _Source:
    slug: str
    name: str
    aliases: tuple[str, ...]
    ra: float
    dec: float
    redshift: float
    ebv: float
    notes: str
    psd_slope: float
    mean_r_mag: float  # magnitude of F_R0 before extinction
    log_rms_dex: float
    spectral_index: float
    gamma_flux: float  # F_γ0, ph cm⁻² s⁻¹
    gamma_power: float
    gamma_lag: float  # days; > 0: gamma lags R
    gamma_bin_days: float
    xray_rate: float  # ct/s at F_R0
    xray_power: float
    xray_lag: float
    xray_campaign_mjd: float


SOURCES: tuple[_Source, ...] = (
    _Source(
        slug="lbmc-0412",
        name="LBMC J0412+2233",
        aliases=("LBMC 1", "Ashgrove blazar"),
        ra=63.0421,
        dec=22.5586,
        redshift=0.312,
        ebv=0.210,
        notes=(
            "Invented flat-spectrum radio quasar behind a dusty Galactic cloud; the "
            "brightest gamma-ray source of the campaign (daily bins)."
        ),
        psd_slope=2.0,
        mean_r_mag=15.1,
        log_rms_dex=0.22,
        spectral_index=1.3,
        gamma_flux=3.0e-7,
        gamma_power=1.5,
        gamma_lag=-3.0,
        gamma_bin_days=1.0,
        xray_rate=0.80,
        xray_power=1.0,
        xray_lag=5.0,
        xray_campaign_mjd=59560.0,
    ),
    _Source(
        slug="lbmc-1127",
        name="LBMC J1127+0941",
        aliases=("LBMC 2", "Pellmoor object"),
        ra=171.7913,
        dec=9.6931,
        redshift=0.874,
        ebv=0.035,
        notes="Invented BL Lac-type object; gamma rays in 3-day bins, often only upper limits.",
        psd_slope=1.6,
        mean_r_mag=16.3,
        log_rms_dex=0.18,
        spectral_index=1.1,
        gamma_flux=1.5e-7,
        gamma_power=2.0,
        gamma_lag=8.0,
        gamma_bin_days=3.0,
        xray_rate=0.25,
        xray_power=0.8,
        xray_lag=-2.0,
        xray_campaign_mjd=59680.0,
    ),
    _Source(
        slug="lbmc-2209",
        name="LBMC J2209-0517",
        aliases=("LBMC 3",),
        ra=332.2704,
        dec=-5.2903,
        redshift=1.431,
        ebv=0.058,
        notes="Invented high-redshift quasar; gamma rays in weekly bins.",
        psd_slope=2.3,
        mean_r_mag=17.0,
        log_rms_dex=0.16,
        spectral_index=1.0,
        gamma_flux=1.1e-7,
        gamma_power=1.2,
        gamma_lag=0.0,
        gamma_bin_days=7.0,
        xray_rate=0.12,
        xray_power=1.4,
        xray_lag=12.0,
        xray_campaign_mjd=59850.0,
    ),
)

PEOPLE = (
    {"username": "ilundqvar", "first_name": "Ines", "last_name": "Lundqvar", "role": "contributor"},
    {
        "username": "bharrowgate",
        "first_name": "Bram",
        "last_name": "Harrowgate",
        "role": "contributor",
    },
    {"username": "yoteri", "first_name": "Yusra", "last_name": "Oteri", "role": "contributor"},
    {"username": "dsalvany", "first_name": "Dalia", "last_name": "Salvany", "role": "contributor"},
    {"username": "kfenwright", "first_name": "Kalle", "last_name": "Fenwright", "role": "curator"},
)


# --------------------------------------------------------------------------- geometry


def solar_elongation(mjd: npt.ArrayLike, ra_deg: float, dec_deg: float) -> FloatArray:
    """Angle between the Sun and a source, in degrees.

    The Sun's position comes from the low-precision formulae of the
    Astronomical Almanac (section C, "Sun"; about 0.01° from 1950 to 2050):
    mean longitude L = 280.460° + 0.9856474° n, mean anomaly
    g = 357.528° + 0.9856003° n, ecliptic longitude λ = L + 1.915° sin g +
    0.020° sin 2g, with n = JD − 2451545.0; λ is referred back to the J2000
    equinox (general precession, 1.397° per century) and turned into right
    ascension and declination with the J2000 obliquity ε = 23.4393°.

    Parameters
    ----------
    mjd : array_like
        Times (MJD, any scale: the difference is far below the formula's accuracy).
    ra_deg, dec_deg : float
        Source position (degrees, ICRS).

    Returns
    -------
    numpy.ndarray
        Elongation in degrees (0–180).
    """
    n = np.asarray(mjd, dtype=float) + 2400000.5 - 2451545.0
    g = np.radians(357.528 + 0.9856003 * n)
    lam_date = 280.460 + 0.9856474 * n + 1.915 * np.sin(g) + 0.020 * np.sin(2 * g)
    # Back from the equinox of date to J2000 (general precession 1.397° per century),
    # with the J2000 obliquity, so that the Sun is on the axes of the ICRS source position.
    lam = np.radians(lam_date - 1.397 * n / 36525.0)
    eps = np.radians(23.4393)
    ra_sun = np.arctan2(np.cos(eps) * np.sin(lam), np.cos(lam))
    dec_sun = np.arcsin(np.sin(eps) * np.sin(lam))
    ra, dec = np.radians(ra_deg), np.radians(dec_deg)
    cos_d = np.sin(dec) * np.sin(dec_sun) + np.cos(dec) * np.cos(dec_sun) * np.cos(ra - ra_sun)
    return np.degrees(np.arccos(np.clip(cos_d, -1.0, 1.0)))


def source_altitude(
    mjd_utc: npt.ArrayLike, ra_deg: float, dec_deg: float, lon_deg: float, lat_deg: float
) -> FloatArray:
    """Geometric altitude of a source above the horizon, in degrees (no refraction).

    Greenwich mean sidereal time from the approximate formula
    GMST = 18.697374558 h + 24.06570982441908 h · D (D = JD(UT) − 2451545.0;
    U.S. Naval Observatory, good to about 0.1 s per century), UT taken as UTC;
    then sin(alt) = sin φ sin δ + cos φ cos δ cos H with the hour angle
    H = GMST + λ − α.

    Parameters
    ----------
    mjd_utc : array_like
        Times (MJD UTC).
    ra_deg, dec_deg : float
        Source position (degrees).
    lon_deg, lat_deg : float
        Site longitude (east positive) and geodetic latitude (degrees).

    Returns
    -------
    numpy.ndarray
        Altitude in degrees.
    """
    d = np.asarray(mjd_utc, dtype=float) + 2400000.5 - 2451545.0
    gmst_deg = 15.0 * np.mod(18.697374558 + 24.06570982441908 * d, 24.0)
    hour_angle = np.radians(gmst_deg + lon_deg - ra_deg)
    dec, lat = np.radians(dec_deg), np.radians(lat_deg)
    sin_alt = np.sin(lat) * np.sin(dec) + np.cos(lat) * np.cos(dec) * np.cos(hour_angle)
    return np.degrees(np.arcsin(np.clip(sin_alt, -1.0, 1.0)))


# --------------------------------------------------------------------------- model


@dataclass
class ModelCurves:
    """The noiseless model of one source on the regular grid.

    ``t`` is BJD_TDB as MJD (days); ``log_flux_r`` is log10 of the intrinsic
    (unreddened) R-band flux density in mJy; ``log_flux_gamma`` log10 of the
    gamma-ray photon flux (ph cm⁻² s⁻¹); ``log_rate_xray`` log10 of the X-ray
    count rate (ct s⁻¹).
    """

    t: FloatArray
    log_flux_r: FloatArray
    log_flux_gamma: FloatArray
    log_rate_xray: FloatArray

    def at(self, times: npt.ArrayLike, which: str = "r") -> FloatArray:
        """Linear interpolation of one curve (``r``, ``gamma`` or ``xray``) at BJD_TDB times."""
        curve = {"r": self.log_flux_r, "gamma": self.log_flux_gamma, "xray": self.log_rate_xray}
        return np.interp(np.asarray(times, dtype=float), self.t, curve[which])


@dataclass
class Dataset:
    """One file's worth of simulated measurements.

    ``columns`` holds the values as written (same order); ``bjd_tdb`` the model
    time of each row; ``true_value`` the noiseless value in the file's unit
    (magnitude with calibration bias, photon flux averaged over the bin, or count
    rate); ``source`` and ``band`` each row's source and band slug.
    """

    path: str
    format: str
    instrument: str
    columns: dict[str, np.ndarray]
    units: dict[str, str | None]
    bjd_tdb: FloatArray
    true_value: FloatArray
    source: np.ndarray
    band: np.ndarray
    upload: dict[str, Any]
    meta: dict[str, Any] = field(default_factory=dict)


@dataclass
class Campaign:
    """The simulated campaign: model curves per source, the files' data and the manifest."""

    seed: int
    models: dict[str, ModelCurves]
    datasets: list[Dataset]
    manifest: dict[str, Any]


def _rng(seed: int, *keys: int) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence([seed, *keys]))


def _model(source: _Source, index: int, seed: int) -> ModelCurves:
    t0 = CAMPAIGN_START_MJD - _GRID_MARGIN_DAYS
    n = int(round((CAMPAIGN_END_MJD - CAMPAIGN_START_MJD + 2 * _GRID_MARGIN_DAYS) / GRID_STEP_DAYS))
    t = t0 + GRID_STEP_DAYS * np.arange(n + 1)
    x = red_noise(t.size, GRID_STEP_DAYS, source.psd_slope, rng=_rng(seed, index, 0))
    log_r0 = _log_mjy(source.mean_r_mag, OPTICAL_BANDS["R"][2])
    log_r = log_r0 + source.log_rms_dex * x
    shifted = lambda lag: np.interp(t - lag, t, log_r) - log_r0  # noqa: E731
    log_gamma = np.log10(source.gamma_flux) + source.gamma_power * shifted(source.gamma_lag)
    log_xray = np.log10(source.xray_rate) + source.xray_power * shifted(source.xray_lag)
    return ModelCurves(t=t, log_flux_r=log_r, log_flux_gamma=log_gamma, log_rate_xray=log_xray)


def _log_mjy(mag: float | FloatArray, zero_point_jy: float) -> Any:
    return np.log10(zero_point_jy * 1e3) - 0.4 * np.asarray(mag)


@functools.cache
def _earth_spline() -> interpolate.CubicSpline:
    """The Earth's barycentric position over the campaign, at 6-hour nodes."""
    nodes = np.arange(CAMPAIGN_START_MJD - 90.0, CAMPAIGN_END_MJD + 90.0, 0.25)
    xyz = get_body_barycentric("earth", Time(nodes, format="mjd", scale="tdb")).xyz
    return interpolate.CubicSpline(nodes, xyz.to_value(u.m), axis=1)


def _earth_position_m(mjd_tdb: FloatArray) -> FloatArray:
    """Barycentric position of the geocentre (m, ICRS axes), shape (3, n).

    Inside the campaign the ephemeris is interpolated (cubic spline through
    6-hour nodes; the error is below a millimetre, far under a nanosecond of
    light time); elsewhere it is evaluated directly.
    """
    spline = _earth_spline()
    lo, hi = spline.x[0], spline.x[-1]
    if mjd_tdb.size and mjd_tdb.min() >= lo and mjd_tdb.max() <= hi:
        return np.asarray(spline(mjd_tdb))
    time = Time(mjd_tdb, format="mjd", scale="tdb")
    return np.asarray(get_body_barycentric("earth", time).xyz.to_value(u.m))


def bjd_tdb(
    mjd: npt.ArrayLike,
    *,
    scale: str,
    ra_deg: float,
    dec_deg: float,
    site: tuple[float, float, float] | None = None,
) -> FloatArray:
    """BJD_TDB (as MJD) of times recorded at a site or at the geocentre.

    The recommended timestamp of Eastman, Siverd & Gaudi (2010, PASP 122, 935):
    the time in TDB (astropy's time scales) plus the Rømer delay
    ``r · n̂ / c`` of the observer's barycentric position ``r`` towards the
    source ``n̂``. The Earth's position comes from astropy's built-in ephemeris
    (``get_body_barycentric``, no Earth-rotation table needed; see
    :func:`_earth_position_m`); a ground site
    adds its geocentric vector rotated by the Greenwich mean sidereal time,
    neglecting precession, nutation and polar motion (≲ 0.1 ms of the site's
    ≤ 21 ms term).

    Parameters
    ----------
    mjd : array_like
        Recorded times (MJD) in ``scale``.
    scale : str
        astropy time scale of ``mjd`` (``'utc'``, ``'tt'``, ...).
    ra_deg, dec_deg : float
        Source position (degrees, ICRS).
    site : tuple of float, optional
        Geodetic longitude (degrees east), latitude (degrees) and height (m);
        None for the geocentre.

    Returns
    -------
    numpy.ndarray
        BJD_TDB as MJD (days).
    """
    t = Time(np.asarray(mjd, dtype=float), format="mjd", scale=scale)
    tdb = t.tdb
    earth = _earth_position_m(np.asarray(tdb.mjd))
    ra, dec = np.radians(ra_deg), np.radians(dec_deg)
    towards = np.array([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)])
    delay_m = towards @ earth
    if site is not None:
        lon, lat, height = site
        loc = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, height * u.m)
        x, y, z = (c.to_value(u.m) for c in (loc.x, loc.y, loc.z))
        d = np.asarray(t.utc.mjd) + 2400000.5 - 2451545.0
        gmst = np.radians(15.0 * np.mod(18.697374558 + 24.06570982441908 * d, 24.0))
        gx = x * np.cos(gmst) - y * np.sin(gmst)
        gy = x * np.sin(gmst) + y * np.cos(gmst)
        delay_m = delay_m + towards[0] * gx + towards[1] * gy + towards[2] * z
    c = 299792458.0
    return np.asarray(tdb.mjd) + delay_m / c / 86400.0


def _extinction_mag(band: str, ebv: float) -> float:
    wave = np.array([OPTICAL_BANDS[band][1]])
    return float(extinction.ccm89(wave, 3.1 * ebv, 3.1)[0])


def _weather(rng: np.random.Generator, n_nights: int, clear_fraction: float) -> np.ndarray:
    """Clear nights: an AR(1) sequence (ρ = 0.6) below its ``clear_fraction`` quantile."""
    noise = signal.lfilter([1.0], [1.0, -0.6], rng.standard_normal(n_nights))
    threshold = special.ndtri(clear_fraction) / np.sqrt(1 - 0.6**2)
    return noise < threshold


def _optical_visits(
    site: _Site, source: _Source, nights: FloatArray, clear: np.ndarray, rng: np.random.Generator
) -> FloatArray:
    """MJD UTC of the first exposure of each visit."""
    midnight = nights + np.mod(-site.lon / 360.0, 1.0)
    offsets = np.linspace(-5.0, 5.0, 21) / 24.0
    grid = midnight[:, None] + offsets[None, :]
    alt = source_altitude(grid, source.ra, source.dec, site.lon, site.lat)
    best = np.argmax(alt, axis=1)
    best_alt = alt[np.arange(nights.size), best]
    elong = solar_elongation(midnight, source.ra, source.dec)
    visible = (best_alt > 25.0) & (elong > 45.0) & clear
    start = grid[np.arange(nights.size), best] + rng.uniform(-0.25, 0.25, nights.size) / 24.0
    return start[visible]


def _optical_dataset_rows(
    site: _Site,
    source: _Source,
    model: ModelCurves,
    visits: FloatArray,
    rng: np.random.Generator,
    bands: Sequence[str],
) -> dict[str, np.ndarray]:
    """One row per band per visit: time (MJD UTC), band, magnitude, error, truth."""
    k = np.arange(len(bands))
    mjd = (visits[:, None] + k[None, :] * 6.0 / 1440.0).ravel()  # six minutes per band
    band = np.tile(np.array(bands, dtype=object), visits.size)
    keep = rng.uniform(size=mjd.size) > 0.08  # a filter now and then not observed
    mjd, band = mjd[keep], band[keep]
    bjd = bjd_tdb(
        mjd,
        scale="utc",
        ra_deg=source.ra,
        dec_deg=source.dec,
        site=(site.lon, site.lat, site.height),
    )
    log_r = model.at(bjd, "r")
    true_mag = np.empty(mjd.size)
    for b in bands:  # a handful of bands, each a vector operation
        sel = band == b
        _, wave, zp = OPTICAL_BANDS[b]
        log_f = log_r[sel] + source.spectral_index * np.log10(wave / OPTICAL_BANDS["R"][1])
        log_f += np.log10(site.bias[b]) - 0.4 * _extinction_mag(b, source.ebv)
        true_mag[sel] = np.log10(zp * 1e3) * 2.5 - 2.5 * log_f
    sigma = np.hypot(site.error_floor, site.error_at_16 * 10 ** (0.4 * (true_mag - 16.0)))
    sigma = np.clip(sigma, 0.003, 0.3)
    mag = true_mag + sigma * rng.standard_normal(mjd.size)
    return {
        "mjd_utc": mjd,
        "band": band,
        "mag": np.round(mag, 3),
        "mag_err": np.maximum(np.round(sigma, 3), 0.003),
        "bjd_tdb": bjd,
        "true_mag": true_mag,
    }


def _gamma_rows(
    source: _Source, model: ModelCurves, rng: np.random.Generator
) -> dict[str, np.ndarray]:
    width = source.gamma_bin_days
    edges_tt = np.arange(CAMPAIGN_START_MJD, CAMPAIGN_END_MJD + 0.5 * width, width)
    lo, hi = edges_tt[:-1], edges_tt[1:]
    keep = (hi <= GAMMA_SAFE_MODE[0]) | (lo >= GAMMA_SAFE_MODE[1])
    lo, hi = lo[keep], hi[keep]
    mid = 0.5 * (lo + hi)
    bjd_mid = bjd_tdb(mid, scale="tt", ra_deg=source.ra, dec_deg=source.dec)
    # The barycentric correction changes by < 0.3 s per hour: one value per bin will do.
    shift = bjd_mid - mid
    sub = (np.arange(int(24 * width)) + 0.5) / (24 * width)
    samples = lo[:, None] + (hi - lo)[:, None] * sub[None, :] + shift[:, None]
    true_flux = np.mean(10 ** model.at(samples.ravel(), "gamma").reshape(samples.shape), axis=1)
    exposure = GAMMA_EXPOSURE_PER_DAY * width
    n_src = true_flux * exposure
    sigma = np.sqrt(n_src + GAMMA_BACKGROUND_PER_DAY * width) / exposure
    measured = true_flux + sigma * rng.standard_normal(true_flux.size)
    ts = np.where(measured > 0, (measured / sigma) ** 2, 0.0)
    upper = ts < GAMMA_TS_LIMIT
    value = np.where(upper, np.maximum(measured, 0.0) + GAMMA_UL_SIGMA * sigma, measured)
    met = (mid - MET_EPOCH_MJD_TT) * 86400.0
    return {
        "TIME": np.round(met, 3),
        "TIME_ERR": np.full(mid.size, 0.5 * width * 86400.0),
        "FLUX": value.astype(np.float32),
        "FLUX_ERR": np.where(upper, np.nan, sigma).astype(np.float32),
        "UL": upper,
        "TS": ts.astype(np.float32),
        "NPRED": n_src.astype(np.float32),
        "bjd_tdb": bjd_mid,
        "true_flux": true_flux,
        "mjd_tt": mid,
    }


def _xray_rows(
    source: _Source, model: ModelCurves, rng: np.random.Generator
) -> dict[str, np.ndarray]:
    days = np.arange(CAMPAIGN_START_MJD, CAMPAIGN_END_MJD)
    allowed = solar_elongation(days, source.ra, source.dec) > 46.0
    campaign = (days >= source.xray_campaign_mjd) & (days < source.xray_campaign_mjd + 21)
    chance = np.where(campaign, 0.9, 0.3)
    chosen = allowed & (rng.uniform(size=days.size) < chance)
    start = days[chosen] + rng.uniform(0.0, 0.95, chosen.sum())
    exposure = np.round(rng.uniform(800.0, 2000.0, start.size), 1)
    mid = start + 0.5 * exposure / 86400.0
    bjd = bjd_tdb(mid, scale="tt", ra_deg=source.ra, dec_deg=source.dec)
    true_rate = 10 ** model.at(bjd, "xray")
    counts = rng.poisson(true_rate * exposure)
    return {
        "mjd_tt": np.round(mid, 6),
        "rate": np.round(counts / exposure, 5),
        "rate_err": np.round(np.sqrt(np.maximum(counts, 1)) / exposure, 5),
        "exposure": exposure,
        "counts": counts.astype(np.int64),
        "bjd_tdb": bjd,
        "true_rate": true_rate,
    }


def _upload(
    path: str,
    uploader: str,
    instrument: str,
    fmt: str,
    columns: dict[str, str],
    *,
    source: str | None,
    band: str | None,
    value_unit: str,
    time_format: str,
    time_scale: str,
    time_reference: str,
    met_epoch: float | None = None,
    reduction: str,
    reference: str,
) -> dict[str, Any]:
    return {
        "file": path,
        "uploader": uploader,
        "source": source,
        "band": band,
        "instrument": instrument,
        "format": fmt,
        "columns": columns,
        "value_unit": value_unit,
        "time_format": time_format,
        "time_scale": time_scale,
        "time_reference": time_reference,
        "met_epoch": met_epoch,
        "reduction": reduction,
        "reference": reference,
    }


def build_campaign(seed: int = CAMPAIGN_SEED) -> Campaign:
    """Simulate the whole campaign from ``seed``.

    Returns the model curves, every file's rows (with their model time and
    noiseless value) and the manifest; :func:`campaign_files` turns it into bytes.
    """
    models = {s.slug: _model(s, i, seed) for i, s in enumerate(SOURCES)}
    nights = np.arange(CAMPAIGN_START_MJD, CAMPAIGN_END_MJD)
    datasets: list[Dataset] = []
    # Optical and near-infrared, per telescope.
    for k, site in enumerate(SITES):
        clear = _weather(_rng(seed, 100 + k), nights.size, site.clear_fraction)
        per_source = []
        for i, src in enumerate(SOURCES):
            rng = _rng(seed, i, 10 + k)
            visits = _optical_visits(site, src, nights, clear, rng)
            per_source.append((src, visits, rng))
        if site.slug == "velmora-13":
            for src, visits, rng in per_source:
                rows = _optical_dataset_rows(site, src, models[src.slug], visits, rng, site.bands)
                datasets.append(_velmora_dataset(site, src, rows))
        elif site.slug == "tarsk-08":
            parts = [
                (src, _optical_dataset_rows(site, src, models[src.slug], v, r, site.bands))
                for src, v, r in per_source
            ]
            datasets.append(_tarsk_dataset(site, parts))
        else:
            optical = ("B", "V", "R")
            parts_j = []
            for src, visits, rng in per_source:
                rows = _optical_dataset_rows(site, src, models[src.slug], visits, rng, optical)
                datasets.append(_oruna_dataset(site, src, rows))
                # The infrared camera takes one J frame after the optical set.
                j_visits = visits + 20.0 / 1440.0
                parts_j.append(
                    (src, _optical_dataset_rows(site, src, models[src.slug], j_visits, rng, ("J",)))
                )
            datasets.append(_oruna_j_dataset(site, parts_j))
    for i, src in enumerate(SOURCES):
        datasets.append(_xray_dataset(src, _xray_rows(src, models[src.slug], _rng(seed, i, 20))))
    for i, src in enumerate(SOURCES):
        datasets.append(_gamma_dataset(src, _gamma_rows(src, models[src.slug], _rng(seed, i, 30))))
    manifest = _manifest(seed, datasets)
    return Campaign(seed=seed, models=models, datasets=datasets, manifest=manifest)


# --------------------------------------------------------------------------- datasets


def _velmora_dataset(site: _Site, src: _Source, rows: dict[str, np.ndarray]) -> Dataset:
    path = f"optical/velmora_{src.slug}.csv"
    jd = np.round(rows["mjd_utc"] + 2400000.5, 5)
    return Dataset(
        path=path,
        format="csv",
        instrument=site.slug,
        columns={
            "jd_utc": jd,
            "band": rows["band"],
            "mag": rows["mag"],
            "mag_err": rows["mag_err"],
        },
        units=dict.fromkeys(("jd_utc", "band", "mag", "mag_err")),
        bjd_tdb=rows["bjd_tdb"],
        true_value=rows["true_mag"],
        source=np.full(jd.size, src.slug, dtype=object),
        band=rows["band"],
        upload=_upload(
            path,
            "ilundqvar",
            site.slug,
            "csv",
            {"time": "jd_utc", "value": "mag", "error": "mag_err", "band": "band"},
            source=src.slug,
            band=None,
            value_unit="mag",
            time_format="jd",
            time_scale="utc",
            time_reference="TOPOCENTER",
            reduction="Aperture photometry against four comparison stars; pipeline v2.3.",
            reference="LBMC internal note 2023-07 (invented)",
        ),
    )


def _tarsk_dataset(site: _Site, parts: list[tuple[_Source, dict[str, np.ndarray]]]) -> Dataset:
    path = "optical/tarsk_all_sources.csv"
    cat = {k: np.concatenate([p[k] for _, p in parts]) for k in parts[0][1]}
    obj = np.concatenate([np.full(p["mag"].size, s.slug, dtype=object) for s, p in parts])
    order = np.argsort(cat["mjd_utc"], kind="stable")
    cat = {k: v[order] for k, v in cat.items()}
    obj = obj[order]
    jd = np.round(cat["mjd_utc"] + 2400000.5, 5)
    return Dataset(
        path=path,
        format="csv",
        instrument=site.slug,
        columns={
            "object": obj,
            "filter": cat["band"],
            "JD": jd,
            "mag": cat["mag"],
            "err": cat["mag_err"],
        },
        units=dict.fromkeys(("object", "filter", "JD", "mag", "err")),
        bjd_tdb=cat["bjd_tdb"],
        true_value=cat["true_mag"],
        source=obj,
        band=cat["band"],
        upload=_upload(
            path,
            "bharrowgate",
            site.slug,
            "csv",
            {"time": "JD", "value": "mag", "error": "err", "band": "filter", "source": "object"},
            source=None,
            band=None,
            value_unit="mag",
            time_format="jd",
            time_scale="utc",
            time_reference="TOPOCENTER",
            reduction="Differential photometry, spreadsheet export (semicolons, decimal commas).",
            reference="Tarsk station log books 2021-2023 (invented)",
        ),
        meta={
            "comments": [
                "Tarsk Plateau Station 0.8 m - LBMC monitoring export",
                "object = LBMC source slug; filter = Johnson-Cousins band",
                "JD = Julian Date (UTC) at the telescope; mag = Vega magnitude",
                "decimal separator: comma",
            ]
        },
    )


def _oruna_dataset(site: _Site, src: _Source, rows: dict[str, np.ndarray]) -> Dataset:
    path = f"optical/oruna_{src.slug}.ecsv"
    jd = np.round(rows["mjd_utc"] + 2400000.5, 5)
    return Dataset(
        path=path,
        format="ecsv",
        instrument=site.slug,
        columns={"jd": jd, "filter": rows["band"], "mag": rows["mag"], "mag_err": rows["mag_err"]},
        units={"jd": "d", "filter": None, "mag": "mag", "mag_err": "mag"},
        bjd_tdb=rows["bjd_tdb"],
        true_value=rows["true_mag"],
        source=np.full(jd.size, src.slug, dtype=object),
        band=rows["band"],
        upload=_upload(
            path,
            "yoteri",
            site.slug,
            "ecsv",
            {"time": "jd", "value": "mag", "error": "mag_err", "band": "filter"},
            source=src.slug,
            band=None,
            value_unit="mag",
            time_format="jd",
            time_scale="utc",
            time_reference="TOPOCENTER",
            reduction="PSF photometry, calibrated on the field's secondary standards.",
            reference="Oruna Hills data release 4 (invented)",
        ),
        meta={
            "observatory": site.name,
            "object": src.name,
            "time_system": "JD, UTC, topocentric (telescope)",
            "magnitude_system": "Vega",
        },
    )


def _oruna_j_dataset(site: _Site, parts: list[tuple[_Source, dict[str, np.ndarray]]]) -> Dataset:
    path = "nir/oruna_J.json"
    cat = {k: np.concatenate([p[k] for _, p in parts]) for k in parts[0][1]}
    obj = np.concatenate([np.full(p["mag"].size, s.slug, dtype=object) for s, p in parts])
    mjd = np.round(cat["mjd_utc"], 6)
    return Dataset(
        path=path,
        format="json",
        instrument=site.slug,
        columns={"target": obj, "mjd": mjd, "J": cat["mag"], "J_err": cat["mag_err"]},
        units={"target": None, "mjd": "d", "J": "mag", "J_err": "mag"},
        bjd_tdb=cat["bjd_tdb"],
        true_value=cat["true_mag"],
        source=obj,
        band=cat["band"],
        upload=_upload(
            path,
            "yoteri",
            site.slug,
            "json",
            {"time": "mjd", "value": "J", "error": "J_err", "source": "target"},
            source=None,
            band="J",
            value_unit="mag",
            time_format="mjd",
            time_scale="utc",
            time_reference="TOPOCENTER",
            reduction="Infrared camera, sky-subtracted dithered frames, field standards.",
            reference="Oruna Hills infrared log (invented)",
        ),
        meta={"observatory": site.name, "camera": "near-infrared imager", "band": "J"},
    )


def _xray_dataset(src: _Source, rows: dict[str, np.ndarray]) -> Dataset:
    path = f"xray/kite_{src.slug}.vot"
    names = ("mjd_tt", "rate", "rate_err", "exposure", "counts")
    return Dataset(
        path=path,
        format="votable",
        instrument=SPACE["xray"]["slug"],
        columns={k: rows[k] for k in names},
        units={
            "mjd_tt": "d",
            "rate": "ct / s",
            "rate_err": "ct / s",
            "exposure": "s",
            "counts": None,
        },
        bjd_tdb=rows["bjd_tdb"],
        true_value=rows["true_rate"],
        source=np.full(rows["rate"].size, src.slug, dtype=object),
        band=np.full(rows["rate"].size, XRAY_BAND, dtype=object),
        upload=_upload(
            path,
            "dsalvany",
            SPACE["xray"]["slug"],
            "votable",
            {"time": "mjd_tt", "value": "rate", "error": "rate_err"},
            source=src.slug,
            band=XRAY_BAND,
            value_unit="ct / s",
            time_format="mjd",
            time_scale="tt",
            time_reference="GEOCENTER",
            reduction="Source counts in a 47 arcsec circle, background annulus subtracted.",
            reference="Kite quick-look pipeline 1.8 (invented)",
        ),
        meta={"object": src.name, "ra": src.ra, "dec": src.dec},
    )


def _gamma_dataset(src: _Source, rows: dict[str, np.ndarray]) -> Dataset:
    path = f"gamma/skylark_{src.slug}.fits"
    names = ("TIME", "TIME_ERR", "FLUX", "FLUX_ERR", "UL", "TS", "NPRED")
    return Dataset(
        path=path,
        format="fits",
        instrument=SPACE["gamma"]["slug"],
        columns={k: rows[k] for k in names},
        units={
            "TIME": "s",
            "TIME_ERR": "s",
            "FLUX": "ph cm-2 s-1",
            "FLUX_ERR": "ph cm-2 s-1",
            "UL": None,
            "TS": None,
            "NPRED": None,
        },
        bjd_tdb=rows["bjd_tdb"],
        true_value=rows["true_flux"],
        source=np.full(rows["FLUX"].size, src.slug, dtype=object),
        band=np.full(rows["FLUX"].size, GAMMA_BAND, dtype=object),
        upload=_upload(
            path,
            "dsalvany",
            SPACE["gamma"]["slug"],
            "fits",
            {
                "time": "TIME",
                "value": "FLUX",
                "error": "FLUX_ERR",
                "upper_limit": "UL",
                "time_error": "TIME_ERR",
            },
            source=src.slug,
            band=GAMMA_BAND,
            value_unit="ph / (cm2 s)",
            time_format="met",
            time_scale="tt",
            time_reference="GEOCENTER",
            met_epoch=MET_EPOCH_MJD_TT,
            reduction=(
                f"Binned likelihood, power law with photon index {GAMMA_PHOTON_INDEX} fixed; "
                f"{src.gamma_bin_days:g}-day bins; TS < 4: 95 % upper limit."
            ),
            reference="Skylark light-curve service (invented)",
        ),
        meta={"bin_days": src.gamma_bin_days, "mjd_tt": rows["mjd_tt"]},
    )


# --------------------------------------------------------------------------- manifest


def _manifest(seed: int, datasets: list[Dataset]) -> dict[str, Any]:
    sources = [
        {
            "slug": s.slug,
            "name": s.name,
            "aliases": list(s.aliases),
            "ra": s.ra,
            "dec": s.dec,
            "redshift": s.redshift,
            "ebv": s.ebv,
            "notes": s.notes,
        }
        for s in SOURCES
    ]
    instruments = [
        {
            "slug": site.slug,
            "name": site.name,
            "kind": "ground",
            "site_lon": site.lon,
            "site_lat": site.lat,
            "site_height": site.height,
            "default_time_format": "jd",
            "default_time_scale": "utc",
            "default_time_reference": "TOPOCENTER",
            "met_epoch": None,
        }
        for site in SITES
    ]
    instruments.append(
        {
            "slug": SPACE["xray"]["slug"],
            "name": SPACE["xray"]["name"],
            "kind": "space",
            "site_lon": None,
            "site_lat": None,
            "site_height": None,
            "default_time_format": "mjd",
            "default_time_scale": "tt",
            "default_time_reference": "GEOCENTER",
            "met_epoch": None,
        }
    )
    instruments.append(
        {
            "slug": SPACE["gamma"]["slug"],
            "name": SPACE["gamma"]["name"],
            "kind": "space",
            "site_lon": None,
            "site_lat": None,
            "site_height": None,
            "default_time_format": "met",
            "default_time_scale": "tt",
            "default_time_reference": "GEOCENTER",
            "met_epoch": MET_EPOCH_MJD_TT,
        }
    )
    bands: list[dict[str, Any]] = [
        {
            "slug": slug,
            "name": name,
            "kind": "flux_density",
            "wavelength_eff": wave,
            "mag_system": "Vega",
            "zero_point_jy": zp,
            "energy_min_kev": None,
            "energy_max_kev": None,
            "pivot_energy_kev": None,
            "photon_index": None,
            "counts_to_energy_flux": None,
        }
        for slug, (name, wave, zp) in OPTICAL_BANDS.items()
    ]
    bands.append(
        {
            "slug": GAMMA_BAND,
            "name": "Gamma rays 0.1-300 GeV (photon flux)",
            "kind": "photon_flux",
            "wavelength_eff": None,
            "mag_system": "",
            "zero_point_jy": None,
            "energy_min_kev": 1.0e5,
            "energy_max_kev": 3.0e8,
            "pivot_energy_kev": 1.0e6,
            "photon_index": GAMMA_PHOTON_INDEX,
            "counts_to_energy_flux": None,
        }
    )
    bands.append(
        {
            "slug": XRAY_BAND,
            "name": "X-rays 0.3-10 keV (count rate)",
            "kind": "count_rate",
            "wavelength_eff": None,
            "mag_system": "",
            "zero_point_jy": None,
            "energy_min_kev": 0.3,
            "energy_max_kev": 10.0,
            "pivot_energy_kev": None,
            "photon_index": XRAY_PHOTON_INDEX,
            "counts_to_energy_flux": XRAY_COUNTS_TO_ENERGY_FLUX,
        }
    )
    offsets = [
        {"instrument": site.slug, "band": b, "factor": round(1.0 / site.bias[b], 6)}
        for site in SITES
        for b in site.bands
    ]
    truth = {
        "seed": seed,
        "time_frame": "model times are BJD_TDB (MJD); files carry the instruments' own times",
        "lag_convention": (
            "positive lag: y lags x (DESIGN §4); x = R-band flux density, y = the band named"
        ),
        "model": (
            "log10 F_R = log10 F_R0 + rms_dex * x(t), x red noise with P(f) ~ f^-psd_slope "
            "(Timmer & Koenig 1995), zero mean, unit variance, grid step grid_step_days; "
            "F_y(t) = F_y0 * (F_R(t - lag_days) / F_R0)^power; optical/near-IR colours "
            "F_nu ~ nu^-spectral_index; Galactic extinction CCM89 with R_V = 3.1"
        ),
        "grid_step_days": GRID_STEP_DAYS,
        "campaign_mjd": [CAMPAIGN_START_MJD, CAMPAIGN_END_MJD],
        "gamma_upper_limits": {
            "rule": "TS < 4 reported as a 95 % upper limit max(F, 0) + 1.645 sigma",
            "exposure_cm2_s_per_day": GAMMA_EXPOSURE_PER_DAY,
            "background_photons_per_day": GAMMA_BACKGROUND_PER_DAY,
            "safe_mode_gap_mjd_tt": list(GAMMA_SAFE_MODE),
        },
        "calibration_bias": {
            site.slug: {b: round(site.bias[b], 9) for b in site.bands} for site in SITES
        },
        "sources": {
            s.slug: {
                "seed": [seed, i],
                "psd_slope": s.psd_slope,
                "R_mag_at_F_R0_unreddened": s.mean_r_mag,
                "F_R0_mjy": round(10 ** float(_log_mjy(s.mean_r_mag, OPTICAL_BANDS["R"][2])), 6),
                "rms_dex": s.log_rms_dex,
                "spectral_index": s.spectral_index,
                "bands": {
                    GAMMA_BAND: {
                        "lag_days": s.gamma_lag,
                        "power": s.gamma_power,
                        "F_y0": s.gamma_flux,
                        "unit": "ph cm-2 s-1",
                        "bin_days": s.gamma_bin_days,
                    },
                    XRAY_BAND: {
                        "lag_days": s.xray_lag,
                        "power": s.xray_power,
                        "F_y0": s.xray_rate,
                        "unit": "ct s-1",
                        "dense_campaign_mjd": [s.xray_campaign_mjd, s.xray_campaign_mjd + 21],
                    },
                },
            }
            for i, s in enumerate(SOURCES)
        },
    }
    people = [dict(p) for p in PEOPLE]
    return {
        "consortium": CONSORTIUM,
        "sources": sources,
        "instruments": instruments,
        "bands": bands,
        "calibration_offsets": offsets,
        "people": people,
        "uploads": [d.upload for d in datasets],
        "truth": truth,
    }


# --------------------------------------------------------------------------- writers


def _fmt(values: np.ndarray, spec: str, decimal: str = ".") -> np.ndarray:
    out = np.char.mod(spec, np.asarray(values, dtype=float))
    return np.char.replace(out, ".", decimal) if decimal != "." else out


def _csv_bytes(
    columns: dict[str, np.ndarray],
    specs: dict[str, str | None],
    *,
    sep: str,
    decimal: str = ".",
    comments: Sequence[str] = (),
    newline: str = "\n",
) -> bytes:
    cells = [
        _fmt(v, spec, decimal) if spec else np.asarray(v, dtype=str)
        for v, spec in ((columns[k], specs[k]) for k in columns)
    ]
    body = cells[0].astype(object)
    for c in cells[1:]:
        body = body + sep + c.astype(object)
    lines = [f"# {c}" for c in comments] + [sep.join(columns)] + list(body)
    return (newline.join(lines) + newline).encode("utf-8")


def _ecsv_bytes(d: Dataset) -> bytes:
    table = Table()
    formats = {"jd": ".5f", "mag": ".3f", "mag_err": ".3f"}
    for name, values in d.columns.items():
        table[name] = values if values.dtype != object else values.astype(str)
        if d.units.get(name):
            table[name].unit = d.units[name]
        if name in formats:
            table[name].format = formats[name]
    table.meta.update(d.meta)
    buf = io.StringIO()
    table.write(buf, format="ascii.ecsv")
    return buf.getvalue().encode("utf-8")


def _votable_bytes(d: Dataset) -> bytes:
    table = Table()
    for name, values in d.columns.items():
        table[name] = values
        if d.units.get(name):
            table[name].unit = d.units[name]
    vot = votable.from_table(table)
    vot.infos.append(tree.Info(name="mission", value=SPACE["xray"]["name"]))
    vot.infos.append(tree.Info(name="object", value=d.meta["object"]))
    resource = vot.resources[0]
    resource.time_systems.append(
        tree.TimeSys(
            ID="tt_geocentre",
            timeorigin="MJD-origin",
            timescale="TT",
            refposition="GEOCENTER",
            config={"version_1_4_or_later": True},
        )
    )
    for name, value, unit in (
        ("energy_min", 0.3, "keV"),
        ("energy_max", 10.0, "keV"),
        ("counts_to_energy_flux", XRAY_COUNTS_TO_ENERGY_FLUX, None),
        ("ra", d.meta["ra"], "deg"),
        ("dec", d.meta["dec"], "deg"),
    ):
        param = tree.Param(vot, name=name, ID=name, datatype="double", value=repr(value), unit=unit)
        if unit is None:
            param.description = "erg cm-2 s-1 (0.3-10 keV) per ct s-1"
        resource.params.append(param)
    first = vot.get_first_table()
    first.fields[0].ref = "tt_geocentre"
    first.fields[0].ucd = "time.epoch"
    first.fields[1].ucd = "phot.count;arith.rate"
    buf = io.BytesIO()
    vot.to_xml(buf)
    return buf.getvalue()


def _fits_bytes(d: Dataset, src: _Source) -> bytes:
    forms = {
        "TIME": "D",
        "TIME_ERR": "D",
        "FLUX": "E",
        "FLUX_ERR": "E",
        "UL": "L",
        "TS": "E",
        "NPRED": "E",
    }
    cols = [
        fits.Column(name=k, format=forms[k], unit=d.units[k], array=v) for k, v in d.columns.items()
    ]
    hdu = fits.BinTableHDU.from_columns(cols, name="LIGHTCURVE")
    mjd_tt = d.meta["mjd_tt"]
    width = float(d.meta["bin_days"])
    h = hdu.header
    cards = [
        ("TELESCOP", "SKYLARK", "invented gamma-ray mission"),
        ("INSTRUME", "GST", "Gamma-ray Survey Telescope"),
        ("OBJECT", src.name, "source name"),
        ("RA_OBJ", src.ra, "[deg] source right ascension (ICRS)"),
        ("DEC_OBJ", src.dec, "[deg] source declination (ICRS)"),
        ("RADESYS", "ICRS", ""),
        ("TIMESYS", "TT", "time scale of TIME"),
        ("MJDREFI", MET_EPOCH_MJDREFI, "[d] MET epoch, integer part (TT)"),
        ("MJDREFF", MET_EPOCH_MJDREFF, "[d] MET epoch, fraction (TT)"),
        ("TIMEUNIT", "s", "unit of TIME, TSTART, TSTOP"),
        ("TIMEZERO", 0.0, "[s] clock correction"),
        ("TREFPOS", "GEOCENTER", "times refer to the geocentre"),
        ("TSTART", round((mjd_tt[0] - 0.5 * width - MET_EPOCH_MJD_TT) * 86400.0, 3), "[s] MET"),
        ("TSTOP", round((mjd_tt[-1] + 0.5 * width - MET_EPOCH_MJD_TT) * 86400.0, 3), "[s] MET"),
        ("TIMEDEL", width * 86400.0, "[s] bin width"),
        ("EMIN", 100.0, "[MeV] lower energy"),
        ("EMAX", 300000.0, "[MeV] upper energy"),
        ("PHOTINDX", GAMMA_PHOTON_INDEX, "power-law photon index of the fits"),
        ("TSLIMIT", GAMMA_TS_LIMIT, "TS below this: 95% upper limit in FLUX"),
    ]
    for key, value, comment in cards:
        h[key] = (value, comment)
    h["COMMENT"] = "Invented data of the LBMC demonstration campaign."
    primary = fits.PrimaryHDU()
    primary.header["TELESCOP"] = ("SKYLARK", "invented gamma-ray mission")
    primary.header["ORIGIN"] = ("LBMC", "invented collaboration")
    primary.header["CREATOR"] = ("lcstore.science.campaign", "")
    buf = io.BytesIO()
    fits.HDUList([primary, hdu]).writeto(buf)
    return buf.getvalue()


def _json_bytes(d: Dataset) -> bytes:
    names = list(d.columns)
    rows = [
        dict(zip(names, r, strict=True))
        for r in zip(
            *(v.tolist() if v.dtype != object else [str(x) for x in v] for v in d.columns.values()),
            strict=True,
        )
    ]
    doc = {"meta": d.meta, "units": {k: v for k, v in d.units.items() if v}, "rows": rows}
    text = json.dumps(doc, indent=None, separators=(",", ":"))
    # One row per line keeps the file readable and diff-friendly.
    text = text.replace("},{", "},\n{").replace('"rows":[{', '"rows":[\n{')
    return (text + "\n").encode("utf-8")


def campaign_files(campaign: Campaign) -> dict[str, bytes]:
    """Every fixture file as bytes, keyed by its path relative to the fixtures directory."""
    by_slug = {s.slug: s for s in SOURCES}
    files: dict[str, bytes] = {}
    for d in campaign.datasets:
        if d.path.startswith("optical/velmora"):
            specs = {"jd_utc": "%.5f", "band": None, "mag": "%.3f", "mag_err": "%.3f"}
            files[d.path] = _csv_bytes(d.columns, specs, sep=",")
        elif d.path.startswith("optical/tarsk"):
            specs = {"object": None, "filter": None, "JD": "%.5f", "mag": "%.3f", "err": "%.3f"}
            files[d.path] = _csv_bytes(
                d.columns,
                specs,
                sep=";",
                decimal=",",
                comments=d.meta["comments"],
                newline="\r\n",
            )
        elif d.format == "ecsv":
            files[d.path] = _ecsv_bytes(d)
        elif d.format == "json":
            files[d.path] = _json_bytes(d)
        elif d.format == "votable":
            files[d.path] = _votable_bytes(d)
        elif d.format == "fits":
            files[d.path] = _fits_bytes(d, by_slug[d.source[0]])
    files["campaign.json"] = (
        json.dumps(campaign.manifest, indent=2, ensure_ascii=False) + "\n"
    ).encode("utf-8")
    return files


def write_campaign(directory: str | Path, seed: int = CAMPAIGN_SEED) -> list[Path]:
    """Simulate the campaign and write its files under ``directory``; returns the paths."""
    root = Path(directory)
    written = []
    for rel, data in campaign_files(build_campaign(seed)).items():
        path = root / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(data)
        written.append(path)
    return written


def main(argv: Sequence[str] | None = None) -> int:
    """Command line: ``python -m lcstore.science.campaign DIRECTORY [--seed N]``."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("directory", help="where to write the fixture files")
    parser.add_argument("--seed", type=int, default=CAMPAIGN_SEED)
    args = parser.parse_args(argv)
    paths = write_campaign(args.directory, args.seed)
    total = sum(p.stat().st_size for p in paths)
    print(f"wrote {len(paths)} files, {total / 1e6:.2f} MB, to {args.directory}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
