"""Flux units of light-curve points: conversion to and from lcstore's canonical units.

Every band has a *kind* that fixes its canonical unit (DESIGN.md §3):

========================  ==========================  ===============================
kind                      canonical unit              typical band
========================  ==========================  ===============================
``flux_density``          mJy                         optical, infrared, radio
``energy_flux``           erg cm^-2 s^-1              X-ray, gamma-ray (band-integrated)
``photon_flux``           ph cm^-2 s^-1               gamma-ray (band-integrated)
``count_rate``            ct s^-1                     X-ray (instrument counts)
========================  ==========================  ===============================

Conversions between kinds use only what the band record states:

* spectral flux densities F_nu <-> F_lambda <-> nu F_nu at the band's effective
  wavelength, with astropy's ``spectral_density`` equivalency;
* magnitudes with the band's zero point, f = ZP 10^(-0.4 m) (AB: Oke & Gunn
  1983, ApJ 266, 713, zero point from astropy ``u.ABmag``; Vega-based: the
  curator's zero point, e.g. Bessell, Castelli & Plez 1998, A&A 333, 231,
  Table A2);
* photon flux <-> energy flux <-> nu F_nu at the pivot energy for an assumed
  power law N(E) = K (E/E0)^-Gamma over the band's energy range (the analytic
  integrals of the power law; see :func:`photon_to_energy_flux`);
* count rate <-> energy flux with the band's ``counts_to_energy_flux`` factor.

All conversions are linear in the flux except those to and from magnitudes,
so errors are scaled by the same factor; magnitude errors are propagated to
first order, sigma_f = f 0.4 ln(10) sigma_m and sigma_m = 2.5/ln(10) sigma_f/f.
Errors that are NaN (no error given) stay NaN. Upper limits convert like
values. Physical constants come from astropy (CODATA 2022).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import astropy.units as u
import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "AB_ZERO_POINT_JY",
    "BAND_KINDS",
    "BandSpec",
    "ConversionError",
    "canonical_unit",
    "check_output_unit",
    "energy_to_photon_flux",
    "from_canonical",
    "mag_to_mjy",
    "mjy_to_mag",
    "nufnu_from_photon_flux",
    "photon_to_energy_flux",
    "to_canonical",
]

FloatArray = NDArray[np.float64]

BAND_KINDS: Final = ("flux_density", "energy_flux", "photon_flux", "count_rate")

_MJY: Final = u.mJy
_ENERGY_FLUX: Final = u.erg / (u.cm**2 * u.s)
_PHOTON_FLUX: Final = u.ph / (u.cm**2 * u.s)
_COUNT_RATE: Final = u.ct / u.s
_CANONICAL: Final = {
    "flux_density": _MJY,
    "energy_flux": _ENERGY_FLUX,
    "photon_flux": _PHOTON_FLUX,
    "count_rate": _COUNT_RATE,
}
# Spectral flux densities accepted for flux-density bands (astropy spectral_density
# converts between them at one wavelength); nu F_nu is accepted as an energy flux.
_F_NU: Final = u.Jy
_F_LAMBDA: Final = u.erg / (u.cm**2 * u.s * u.AA)
_PHOT_LAMBDA: Final = u.ph / (u.cm**2 * u.s * u.AA)
_PHOT_NU: Final = u.ph / (u.cm**2 * u.s * u.Hz)

#: Flux density of AB magnitude 0 in Jy (Oke & Gunn 1983), from astropy ``u.ABmag``.
AB_ZERO_POINT_JY: Final = float(u.ABmag.to(u.Jy, 0.0))
_KEV_TO_ERG: Final = float((1.0 * u.keV).to_value(u.erg))
_JY_TO_MJY: Final = float(u.Jy.to(u.mJy))
_LN10: Final = math.log(10.0)
# |exponent| below which the power-law integral takes its logarithmic branch.
_LOG_BRANCH: Final = 1e-9


class ConversionError(ValueError):
    """A value cannot be converted for a band; the message names the band and the reason."""


@dataclass(frozen=True)
class BandSpec:
    """What the unit conversions need to know about a band.

    Attributes
    ----------
    slug : str
        The band's identifier (used in error messages).
    kind : str
        ``'flux_density'``, ``'energy_flux'``, ``'photon_flux'`` or ``'count_rate'``.
    wavelength_eff_aa : float or None
        Effective wavelength, Angstrom (flux-density bands); needed for F_lambda
        and nu F_nu.
    mag_system : str
        ``'AB'``, ``'Vega'`` or ``''`` (no magnitudes).
    zero_point_jy : float or None
        Flux density of magnitude 0, Jy. Required for Vega-based magnitudes;
        for AB, None means astropy's AB zero point (3630.78 Jy).
    energy_min_kev, energy_max_kev : float or None
        Energy range of an integrated band, keV.
    pivot_energy_kev : float or None
        Pivot energy E0 of the power law, keV; None means the geometric mean
        of the energy range.
    photon_index : float or None
        Photon index Gamma of the power law N(E) ∝ E^-Gamma used for conversions.
    counts_to_energy_flux : float or None
        Energy flux per count rate, erg cm^-2 s^-1 per ct s^-1.
    """

    slug: str
    kind: str
    wavelength_eff_aa: float | None = None
    mag_system: str = ""
    zero_point_jy: float | None = None
    energy_min_kev: float | None = None
    energy_max_kev: float | None = None
    pivot_energy_kev: float | None = None
    photon_index: float | None = None
    counts_to_energy_flux: float | None = None

    @property
    def pivot_kev(self) -> float | None:
        """Pivot energy, keV: the stated one, else the geometric mean of the range, else None."""
        if self.pivot_energy_kev is not None:
            return float(self.pivot_energy_kev)
        if self.energy_min_kev is not None and self.energy_max_kev is not None:
            return math.sqrt(self.energy_min_kev * self.energy_max_kev)
        return None

    def frequency_hz(self) -> float | None:
        """Representative frequency of the band, Hz.

        c / lambda_eff for flux-density bands, E0 / h for integrated bands
        (astropy ``spectral`` equivalency); None when the band does not state it.
        """
        if self.kind == "flux_density":
            if self.wavelength_eff_aa is None:
                return None
            return float((self.wavelength_eff_aa * u.AA).to_value(u.Hz, u.spectral()))
        pivot = self.pivot_kev
        if pivot is None:
            return None
        return float((pivot * u.keV).to_value(u.Hz, u.spectral()))


def canonical_unit(kind: str) -> u.UnitBase:
    """Canonical unit of a band kind: mJy, erg/(cm2 s), ph/(cm2 s) or ct/s.

    Raises
    ------
    ConversionError
        If ``kind`` is not one of :data:`BAND_KINDS`.
    """
    try:
        return _CANONICAL[kind]
    except KeyError:
        raise ConversionError(
            f"unknown band kind {kind!r} (expected one of {', '.join(BAND_KINDS)})"
        ) from None


# ---------------------------------------------------------------------------
# Power law N(E) = K (E/E0)^-Gamma over [E1, E2] (analytic integrals)
# ---------------------------------------------------------------------------


def _power_integral(x1: FloatArray, x2: FloatArray, a: FloatArray) -> FloatArray:
    """[x2^a - x1^a] / a, and ln(x2/x1) where |a| < 1e-9 (dimensionless).

    Written as x1^a expm1(a ln(x2/x1)) / a, algebraically the same expression,
    which stays accurate when a is close to (but not within 1e-9 of) zero.
    """
    log_ratio = np.log(x2 / x1)
    on_log = np.abs(a) < _LOG_BRANCH
    a_safe = np.where(on_log, 1.0, a)
    general = np.power(x1, a_safe) * np.expm1(a_safe * log_ratio) / a_safe
    return np.where(on_log, log_ratio, general)


def _check_range(e_min_kev: ArrayLike, e_max_kev: ArrayLike) -> tuple[FloatArray, FloatArray]:
    e1 = np.asarray(e_min_kev, dtype=np.float64)
    e2 = np.asarray(e_max_kev, dtype=np.float64)
    if not (np.all(np.isfinite(e1)) and np.all(np.isfinite(e2))):
        raise ValueError("energy range must be finite")
    if not (np.all(e1 > 0) and np.all(e2 > e1)):
        raise ValueError("energy range must satisfy 0 < e_min_kev < e_max_kev")
    return e1, e2


def _energy_per_photon_kev(
    e1: FloatArray, e2: FloatArray, gamma: FloatArray, e0: FloatArray
) -> FloatArray:
    """Mean photon energy S/F of the power law over [E1, E2], keV.

    S / F = E0 [(E2/E0)^(2-G) - (E1/E0)^(2-G)]/(2-G) / {[(E2/E0)^(1-G) - (E1/E0)^(1-G)]/(1-G)},
    which does not depend on the choice of E0.
    """
    x1, x2 = e1 / e0, e2 / e0
    return e0 * _power_integral(x1, x2, 2.0 - gamma) / _power_integral(x1, x2, 1.0 - gamma)


def _gamma(photon_index: ArrayLike) -> FloatArray:
    g = np.asarray(photon_index, dtype=np.float64)
    if not np.all(np.isfinite(g)):
        raise ValueError("photon index must be finite")
    return g


def photon_to_energy_flux(
    photon_flux: ArrayLike, e_min_kev: ArrayLike, e_max_kev: ArrayLike, photon_index: ArrayLike
) -> FloatArray:
    """Energy flux of a power-law spectrum from its photon flux over the same band.

    For N(E) = K (E/E0)^-Gamma (photons cm^-2 s^-1 keV^-1) over [E1, E2]:

    * photon flux F = K E0 [(E2/E0)^(1-Gamma) - (E1/E0)^(1-Gamma)] / (1 - Gamma)
      (Gamma = 1: K E0 ln(E2/E1)),
    * energy flux S = K E0^2 [(E2/E0)^(2-Gamma) - (E1/E0)^(2-Gamma)] / (2 - Gamma)
      (Gamma = 2: K E0^2 ln(E2/E1)),

    the elementary integrals of the power law (REFERENCES.md §2); the
    logarithmic branch is taken when Gamma is within 1e-9 of 1 or 2. S/F does
    not depend on E0, so E0 = sqrt(E1 E2) is used internally.

    Parameters
    ----------
    photon_flux : array_like
        Photon flux, ph cm^-2 s^-1 (any sign; the conversion is linear).
    e_min_kev, e_max_kev : float or array_like
        Band edges E1 < E2, keV.
    photon_index : float or array_like
        Photon index Gamma.

    Returns
    -------
    ndarray
        Energy flux, erg cm^-2 s^-1 (keV to erg from astropy).
    """
    e1, e2 = _check_range(e_min_kev, e_max_kev)
    g = _gamma(photon_index)
    ratio = _energy_per_photon_kev(e1, e2, g, np.sqrt(e1 * e2))
    return np.asarray(photon_flux, dtype=np.float64) * ratio * _KEV_TO_ERG


def energy_to_photon_flux(
    energy_flux: ArrayLike, e_min_kev: ArrayLike, e_max_kev: ArrayLike, photon_index: ArrayLike
) -> FloatArray:
    """Photon flux of a power-law spectrum from its energy flux over the same band.

    The inverse of :func:`photon_to_energy_flux` (same formulas).

    Parameters
    ----------
    energy_flux : array_like
        Energy flux, erg cm^-2 s^-1.
    e_min_kev, e_max_kev : float or array_like
        Band edges E1 < E2, keV.
    photon_index : float or array_like
        Photon index Gamma.

    Returns
    -------
    ndarray
        Photon flux, ph cm^-2 s^-1.
    """
    e1, e2 = _check_range(e_min_kev, e_max_kev)
    g = _gamma(photon_index)
    ratio = _energy_per_photon_kev(e1, e2, g, np.sqrt(e1 * e2))
    return np.asarray(energy_flux, dtype=np.float64) / (ratio * _KEV_TO_ERG)


def nufnu_from_photon_flux(
    photon_flux: ArrayLike,
    e_min_kev: ArrayLike,
    e_max_kev: ArrayLike,
    photon_index: ArrayLike,
    energy_kev: ArrayLike,
) -> FloatArray:
    """nu F_nu = E^2 N(E) at one energy of a power law normalised by its band photon flux.

    K follows from the photon flux F over [E1, E2] (see
    :func:`photon_to_energy_flux`), then nu F_nu(E) = K E0^2 (E/E0)^(2-Gamma)
    (REFERENCES.md §2). The result does not depend on E0; E0 = E is used.

    Parameters
    ----------
    photon_flux : array_like
        Photon flux over the band, ph cm^-2 s^-1.
    e_min_kev, e_max_kev : float or array_like
        Band edges E1 < E2, keV.
    photon_index : float or array_like
        Photon index Gamma.
    energy_kev : float or array_like
        Energy E at which nu F_nu is wanted (usually the pivot), keV.

    Returns
    -------
    ndarray
        nu F_nu, erg cm^-2 s^-1.
    """
    e1, e2 = _check_range(e_min_kev, e_max_kev)
    g = _gamma(photon_index)
    e = np.asarray(energy_kev, dtype=np.float64)
    if not (np.all(np.isfinite(e)) and np.all(e > 0)):
        raise ValueError("energy_kev must be positive and finite")
    # With E0 = E: F = K E [(E2/E)^(1-G) - (E1/E)^(1-G)]/(1-G), nu F_nu(E) = K E^2.
    per_photon = e / _power_integral(e1 / e, e2 / e, 1.0 - g)
    return np.asarray(photon_flux, dtype=np.float64) * per_photon * _KEV_TO_ERG


# ---------------------------------------------------------------------------
# Magnitudes
# ---------------------------------------------------------------------------


def mag_to_mjy(mag: ArrayLike, zero_point_jy: float) -> FloatArray:
    """Flux density from a magnitude: f = ZP 10^(-0.4 m) (Pogson's ratio).

    Parameters
    ----------
    mag : array_like
        Magnitudes in the system whose zero point is given.
    zero_point_jy : float
        Flux density of magnitude 0, Jy (AB: 3630.78 Jy, Oke & Gunn 1983).

    Returns
    -------
    ndarray
        Flux density, mJy.
    """
    m = np.asarray(mag, dtype=np.float64)
    return zero_point_jy * _JY_TO_MJY * np.power(10.0, -0.4 * m)


def mjy_to_mag(mjy: ArrayLike, zero_point_jy: float) -> FloatArray:
    """Magnitude from a flux density: m = -2.5 log10(f / ZP); NaN where f <= 0.

    Parameters
    ----------
    mjy : array_like
        Flux density, mJy.
    zero_point_jy : float
        Flux density of magnitude 0, Jy.

    Returns
    -------
    ndarray
        Magnitudes (NaN for non-positive or non-finite flux).
    """
    f = np.asarray(mjy, dtype=np.float64)
    positive = f > 0
    ratio = np.where(positive, f, 1.0) / (zero_point_jy * _JY_TO_MJY)
    return np.where(positive, -2.5 * np.log10(ratio), np.nan)


# ---------------------------------------------------------------------------
# Band conversions
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _Plan:
    """How a unit maps onto a band's canonical unit.

    Linear units: canonical = value * ``scale``. Magnitudes: canonical (mJy) =
    ``zero_point_jy`` 10^(-0.4 m).
    """

    label: str
    scale: float | None = None
    zero_point_jy: float | None = None


def _fail(band: BandSpec, reason: str) -> ConversionError:
    return ConversionError(f"band '{band.slug}': {reason}")


def _wavelength(band: BandSpec, what: str) -> u.Quantity:
    lam = band.wavelength_eff_aa
    if lam is None or not (math.isfinite(lam) and lam > 0):
        raise _fail(band, f"{what} needs the band's effective wavelength (wavelength_eff_aa)")
    return lam * u.AA


def _power_law(band: BandSpec, what: str) -> tuple[float, float, float, float]:
    """E1, E2, E0 (keV) and Gamma of the band, or a ConversionError saying what is missing."""
    e1, e2, gamma = band.energy_min_kev, band.energy_max_kev, band.photon_index
    if e1 is None or e2 is None:
        raise _fail(band, f"{what} needs the band's energy range (energy_min_kev, energy_max_kev)")
    if not (math.isfinite(e1) and math.isfinite(e2) and 0 < e1 < e2):
        raise _fail(band, f"energy range {e1}-{e2} keV is not 0 < min < max")
    if gamma is None or not math.isfinite(gamma):
        raise _fail(band, f"{what} needs the band's photon index (photon_index)")
    e0 = band.pivot_kev
    if e0 is None or not (math.isfinite(e0) and e0 > 0):
        raise _fail(band, f"pivot energy {e0} keV is not positive")
    return e1, e2, e0, gamma


def _photons_per_erg(band: BandSpec, what: str) -> float:
    """Photon flux (ph cm^-2 s^-1) per unit energy flux (erg cm^-2 s^-1) of the band's power law."""
    e1, e2, e0, gamma = _power_law(band, what)
    per_photon = _energy_per_photon_kev(
        np.float64(e1), np.float64(e2), np.float64(gamma), np.float64(e0)
    )
    return float(1.0 / (per_photon * _KEV_TO_ERG))


def _nufnu_per_photon_flux(band: BandSpec) -> float:
    """nu F_nu at the pivot (erg cm^-2 s^-1) per unit band photon flux (ph cm^-2 s^-1)."""
    e1, e2, e0, gamma = _power_law(band, "nufnu")
    return float(nufnu_from_photon_flux(1.0, e1, e2, gamma, e0))


def _counts_factor(band: BandSpec, what: str) -> float:
    c = band.counts_to_energy_flux
    if c is None or not (math.isfinite(c) and c > 0):
        raise _fail(
            band, f"{what} needs the band's counts_to_energy_flux (erg cm^-2 s^-1 per ct s^-1)"
        )
    return float(c)


def _photon_scale(unit: u.UnitBase) -> float | None:
    """Factor from ``unit`` to ph/(cm2 s), accepting photon-less 1/(cm2 s); None if not one."""
    if unit.is_equivalent(_PHOTON_FLUX):
        return float(unit.to(_PHOTON_FLUX))
    if unit.is_equivalent(_PHOTON_FLUX / u.ph):
        return float(unit.to(_PHOTON_FLUX / u.ph))
    return None


def _magnitude_plan(band: BandSpec, system: str) -> _Plan:
    if band.kind in ("energy_flux", "photon_flux"):
        raise ConversionError(f"band '{band.slug}' is an energy band and has no magnitude")
    if band.kind == "count_rate":
        raise ConversionError(f"band '{band.slug}' is a count-rate band and has no magnitude")
    if system == "AB_astropy":
        return _Plan(label=u.ABmag.to_string(), zero_point_jy=AB_ZERO_POINT_JY)
    if band.mag_system == "AB":
        zp = band.zero_point_jy if band.zero_point_jy is not None else AB_ZERO_POINT_JY
        return _Plan(label=u.ABmag.to_string(), zero_point_jy=float(zp))
    if band.mag_system == "Vega":
        zp = band.zero_point_jy
        if zp is None:
            raise _fail(band, "Vega magnitudes need the band's zero point (zero_point_jy)")
        if not (math.isfinite(zp) and zp > 0):
            raise _fail(band, f"zero point {zp} Jy is not positive")
        return _Plan(label=u.mag.to_string(), zero_point_jy=float(zp))
    raise _fail(band, "band has no magnitude system (mag_system is empty); use 'ABmag'")


def _nufnu_plan(band: BandSpec) -> _Plan:
    """nu F_nu in erg cm^-2 s^-1 (at lambda_eff, or at the pivot energy for integrated bands)."""
    label = _ENERGY_FLUX.to_string()
    if band.kind == "flux_density":
        lam = _wavelength(band, "nufnu")
        return _Plan(label, float((1.0 * _ENERGY_FLUX).to_value(_MJY, u.spectral_density(lam))))
    if band.kind == "photon_flux":
        return _Plan(label, 1.0 / _nufnu_per_photon_flux(band))
    if band.kind == "energy_flux":
        return _Plan(label, 1.0 / (_photons_per_erg(band, "nufnu") * _nufnu_per_photon_flux(band)))
    # count_rate: to energy flux with the band factor, then as an energy-flux band.
    ct = _counts_factor(band, "nufnu")
    return _Plan(label, 1.0 / (ct * _photons_per_erg(band, "nufnu") * _nufnu_per_photon_flux(band)))


def _flux_density_scale(band: BandSpec, unit: u.UnitBase, text: str) -> float:
    if unit.is_equivalent(_F_NU):
        return float(unit.to(_MJY))
    if any(unit.is_equivalent(k) for k in (_F_LAMBDA, _PHOT_LAMBDA, _PHOT_NU, _ENERGY_FLUX)):
        lam = _wavelength(band, f"unit {text!r}")
        return float((1.0 * unit).to_value(_MJY, u.spectral_density(lam)))
    raise _fail(
        band,
        f"unit {text!r} is not a spectral flux density (F_nu such as mJy, F_lambda such as "
        "erg/(cm2 s AA), or nu F_nu as erg/(cm2 s)) nor 'mag'/'ABmag'",
    )


def _energy_flux_scale(band: BandSpec, unit: u.UnitBase, text: str) -> float:
    if unit.is_equivalent(_ENERGY_FLUX):
        return float(unit.to(_ENERGY_FLUX))
    ph = _photon_scale(unit)
    if ph is not None:
        return ph / _photons_per_erg(band, f"unit {text!r} (photon flux)")
    if unit.is_equivalent(_COUNT_RATE):
        return float(unit.to(_COUNT_RATE)) * _counts_factor(band, f"unit {text!r} (count rate)")
    raise _fail(band, f"unit {text!r} is not an energy flux, photon flux or count rate")


def _photon_flux_scale(band: BandSpec, unit: u.UnitBase, text: str) -> float:
    ph = _photon_scale(unit)
    if ph is not None:
        return ph
    if unit.is_equivalent(_ENERGY_FLUX):
        return float(unit.to(_ENERGY_FLUX)) * _photons_per_erg(band, f"unit {text!r}")
    raise _fail(band, f"unit {text!r} is not a photon flux or an energy flux")


def _count_rate_scale(band: BandSpec, unit: u.UnitBase, text: str) -> float:
    if unit.is_equivalent(_COUNT_RATE):
        return float(unit.to(_COUNT_RATE))
    if unit.is_equivalent(_ENERGY_FLUX):
        return float(unit.to(_ENERGY_FLUX)) / _counts_factor(band, f"unit {text!r}")
    raise _fail(band, f"unit {text!r} is not a count rate (such as ct/s)")


_SCALES: Final = {
    "flux_density": _flux_density_scale,
    "energy_flux": _energy_flux_scale,
    "photon_flux": _photon_flux_scale,
    "count_rate": _count_rate_scale,
}


def _plan(unit: str, band: BandSpec) -> _Plan:
    """Resolve a unit string for a band, or raise ConversionError (nothing is computed)."""
    if band.kind not in _SCALES:
        raise _fail(band, f"unknown band kind {band.kind!r}")
    if not isinstance(unit, str) or not unit.strip():
        raise _fail(band, "no unit given")
    text = unit.strip()
    key = text.lower()
    if key == "nufnu":
        return _nufnu_plan(band)
    if key == "mag":
        return _magnitude_plan(band, "band")
    if key in ("abmag", "mag(ab)"):
        return _magnitude_plan(band, "AB_astropy")
    try:
        parsed = u.Unit(text, parse_strict="raise")
    except (ValueError, TypeError) as exc:
        reason = str(exc).split(" If this is meant")[0].strip()
        raise _fail(band, f"unit {text!r} is not a unit astropy understands ({reason})") from None
    if parsed == u.ABmag:
        return _magnitude_plan(band, "AB_astropy")
    if not isinstance(parsed, u.UnitBase):
        raise _fail(band, f"unit {text!r} is not supported; for magnitudes use 'mag' or 'ABmag'")
    scale = _SCALES[band.kind](band, parsed, text)
    if not (math.isfinite(scale) and scale > 0):
        raise _fail(band, f"unit {text!r} gives a conversion factor of {scale}")
    return _Plan(label=text, scale=scale)


def _arrays(values: ArrayLike, errors: ArrayLike | None) -> tuple[FloatArray, FloatArray]:
    v = np.asarray(values, dtype=np.float64)
    if errors is None:
        return v, np.full(v.shape, np.nan)
    e = np.asarray(errors, dtype=np.float64)
    return v, np.broadcast_to(e, v.shape)


def check_output_unit(unit: str, band: BandSpec) -> None:
    """Raise ConversionError if ``unit`` cannot be used for ``band``; computes nothing.

    Accepts the same strings as :func:`from_canonical`.
    """
    _plan(unit, band)


def to_canonical(
    values: ArrayLike, errors: ArrayLike | None, unit: str, band: BandSpec
) -> tuple[FloatArray, FloatArray]:
    """Convert values and errors given in ``unit`` to the band's canonical unit.

    Parameters
    ----------
    values : array_like
        Values (detections or upper limits alike) in ``unit``.
    errors : array_like or None
        One-sigma errors in ``unit`` (magnitudes: in mag); NaN or None = no error.
    unit : str
        An astropy unit string (``u.Unit(unit, parse_strict='raise')``) of a type
        the band accepts, ``'mag'`` (the band's own magnitude system), ``'ABmag'``
        or ``'nufnu'`` (nu F_nu in erg cm^-2 s^-1, see :func:`from_canonical`).
        Flux-density bands take F_nu, F_lambda and nu F_nu (``erg/(cm2 s)``,
        at lambda_eff) via astropy ``spectral_density``; energy-flux bands take
        energy fluxes, photon fluxes (power law) and count rates (with
        ``counts_to_energy_flux``); photon-flux bands photon and energy fluxes;
        count-rate bands count rates and energy fluxes (with the factor).
    band : BandSpec
        The band.

    Returns
    -------
    values, errors : ndarray
        In the canonical unit (:func:`canonical_unit` of ``band.kind``).
        Magnitude errors propagate to first order, sigma_f = f 0.4 ln(10) sigma_m.

    Raises
    ------
    ConversionError
        If the unit cannot be parsed or does not fit the band, or the band
        lacks what the conversion needs (message names band and reason).
    """
    plan = _plan(unit, band)
    v, e = _arrays(values, errors)
    if plan.scale is not None:
        return v * plan.scale, e * plan.scale
    assert plan.zero_point_jy is not None
    flux = mag_to_mjy(v, plan.zero_point_jy)
    return flux, flux * (0.4 * _LN10) * e


def from_canonical(
    values: ArrayLike, errors: ArrayLike | None, unit: str, band: BandSpec
) -> tuple[FloatArray, FloatArray, str]:
    """Convert canonical values and errors of a band to ``unit``.

    Parameters
    ----------
    values : array_like
        Values in the band's canonical unit.
    errors : array_like or None
        One-sigma errors in the canonical unit; NaN or None = no error.
    unit : str
        Any astropy unit string of a type the band accepts (``mJy``, ``Jy``,
        ``erg/(cm2 s Hz)``, ``erg/(cm2 s AA)``, ``ph/(cm2 s)``, ``erg/(cm2 s)``:
        for integrated bands the energy flux over the band, for flux-density
        bands nu F_nu at lambda_eff), or

        * ``'nufnu'``: nu F_nu in erg cm^-2 s^-1, at lambda_eff for flux-density
          bands, at the pivot energy (power law of the band's photon index) for
          photon- and energy-flux bands, and for count-rate bands via
          ``counts_to_energy_flux`` and then as an energy-flux band;
        * ``'ABmag'``: AB magnitude (astropy zero point);
        * ``'mag'``: the band's own magnitude system.

    band : BandSpec
        The band.

    Returns
    -------
    values, errors : ndarray
        Converted; magnitudes are NaN for non-positive flux, and their errors
        are sigma_m = 2.5/ln(10) sigma_f / f (first order).
    label : str
        The unit of the result as an astropy-parsable string (``'mag(AB)'`` for
        AB magnitudes, ``'mag'`` for Vega-based ones, ``'erg / (s cm2)'`` for
        nu F_nu, otherwise ``unit`` as given, stripped; astropy's normalised form
        would drop the Hz of ``erg/(cm2 s Hz)``).

    Raises
    ------
    ConversionError
        As :func:`to_canonical`; integrated bands have no magnitude.
    """
    plan = _plan(unit, band)
    v, e = _arrays(values, errors)
    if plan.scale is not None:
        return v / plan.scale, e / plan.scale, plan.label
    assert plan.zero_point_jy is not None
    mag = mjy_to_mag(v, plan.zero_point_jy)
    positive = v > 0
    mag_err = np.where(positive, 2.5 / _LN10 * e / np.where(positive, v, 1.0), np.nan)
    return mag, mag_err, plan.label
