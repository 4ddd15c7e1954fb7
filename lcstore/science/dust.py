"""Galactic extinction and de-reddening of flux densities.

The extinction curves are those of the ``extinction`` package (PyPI):

* ``'ccm89'`` — Cardelli, Clayton & Mathis (1989, ApJ 345, 245), the
  R_V-dependent mean law A_λ/A_V = a(x) + b(x)/R_V, their eqs. 1-5, for
  wavenumbers x = 1/λ from 0.3 to 10 µm⁻¹;
* ``'odonnell94'`` — the same with the optical (1.1-3.3 µm⁻¹) coefficients
  of O'Donnell (1994, ApJ 422, 158);
* ``'fitzpatrick99'`` — Fitzpatrick (1999, PASP 111, 63), the
  Fitzpatrick & Massa (1990) ultraviolet form with a spline through the
  optical and infrared.

All scale with A_V = R_V · E(B−V); R_V = 3.1 is the conventional mean
Galactic value. Values are single-wavelength extinctions (at the band's
effective wavelength), not band averages.
"""

from __future__ import annotations

import math

import astropy.units as u
import extinction
import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "LAWS",
    "VALID_RANGE_AA",
    "ExtinctionError",
    "deredden_factor",
    "extinction_mag",
]

LAWS: tuple[str, ...] = ("ccm89", "odonnell94", "fitzpatrick99")

#: Wavelength range (Angstrom, inclusive) over which each law is defined.
#: The ``extinction`` package evaluates its formulae outside these ranges
#: without complaint, so the ranges are enforced here: CCM89 and O'Donnell
#: (1994) are parameterised for 0.3 <= x <= 10 µm⁻¹ (Cardelli et al. 1989,
#: eqs. 2-5); Fitzpatrick (1999) is defined from 910 Å to 6 µm (the
#: ``extinction.fitzpatrick99`` documentation).
VALID_RANGE_AA: dict[str, tuple[float, float]] = {
    "ccm89": (1.0e4 / 10.0, 1.0e4 / 0.3),
    "odonnell94": (1.0e4 / 10.0, 1.0e4 / 0.3),
    "fitzpatrick99": (910.0, 60000.0),
}

_FUNCTIONS = {
    "ccm89": extinction.ccm89,
    "odonnell94": extinction.odonnell94,
    "fitzpatrick99": extinction.fitzpatrick99,
}


class ExtinctionError(ValueError):
    """Raised for an unknown law, a bad E(B−V) or R_V, or a wavelength out of range."""


def _wavelength_aa(wavelength: ArrayLike | u.Quantity) -> NDArray[np.float64]:
    """Wavelengths as a float array in Angstrom (Quantities in any spectral unit)."""
    if isinstance(wavelength, u.Quantity):
        try:
            return np.asarray(wavelength.to_value(u.AA, equivalencies=u.spectral()), dtype=float)
        except u.UnitConversionError as exc:
            raise ExtinctionError(
                f"wavelength must be a length, frequency or energy, got unit {wavelength.unit}"
            ) from exc
    return np.asarray(wavelength, dtype=float)


def extinction_mag(
    wavelength_aa: float | ArrayLike | u.Quantity,
    *,
    ebv: float,
    r_v: float = 3.1,
    law: str = "ccm89",
) -> NDArray[np.float64]:
    """Galactic extinction A_λ in magnitudes at the given wavelengths.

    A_λ = A_V · (A_λ/A_V)_law with A_V = R_V · E(B−V), using the law of
    Cardelli, Clayton & Mathis (1989, ApJ 345, 245; ``'ccm89'``),
    O'Donnell (1994, ApJ 422, 158; ``'odonnell94'``) or Fitzpatrick (1999,
    PASP 111, 63; ``'fitzpatrick99'``) as implemented by the ``extinction``
    package.

    Parameters
    ----------
    wavelength_aa : float or array_like of float, or Quantity
        Wavelength(s) in Angstrom (vacuum, rest frame of our Galaxy, i.e.
        observed). A Quantity may be in any length, frequency or energy
        unit. Any shape.
    ebv : float
        Colour excess E(B−V), mag; must be finite and >= 0.
    r_v : float, optional
        Ratio of total to selective extinction R_V = A_V / E(B−V)
        (default 3.1).
    law : {'ccm89', 'odonnell94', 'fitzpatrick99'}, optional
        Extinction law (default ``'ccm89'``).

    Returns
    -------
    ndarray of float
        A_λ in magnitudes, same shape as ``wavelength_aa``.

    Raises
    ------
    ExtinctionError
        Unknown law, negative or non-finite E(B−V), non-positive R_V, or a
        wavelength outside the law's range (:data:`VALID_RANGE_AA`).
    """
    if law not in _FUNCTIONS:
        raise ExtinctionError(f"unknown extinction law {law!r}; choose one of {', '.join(LAWS)}")
    ebv = float(ebv)
    r_v = float(r_v)
    if not math.isfinite(ebv) or ebv < 0.0:
        raise ExtinctionError(f"E(B-V) must be a finite number >= 0 mag, got {ebv}")
    if not math.isfinite(r_v) or r_v <= 0.0:
        raise ExtinctionError(f"R_V must be a finite positive number, got {r_v}")
    wave = _wavelength_aa(wavelength_aa)
    lo, hi = VALID_RANGE_AA[law]
    outside = ~((wave >= lo) & (wave <= hi))  # also catches NaN
    if outside.any():
        first = float(wave[outside].flat[0])
        raise ExtinctionError(
            f"wavelength {first:g} Angstrom is outside the range of the {law} extinction law "
            f"({lo:g}-{hi:g} Angstrom)"
        )
    flat = np.ascontiguousarray(wave.ravel(), dtype=np.float64)
    a_lambda = _FUNCTIONS[law](flat, r_v * ebv, r_v)
    return np.asarray(a_lambda, dtype=float).reshape(wave.shape)


def deredden_factor(
    wavelength_aa: float | ArrayLike | u.Quantity,
    *,
    ebv: float,
    r_v: float = 3.1,
    law: str = "ccm89",
) -> NDArray[np.float64]:
    """Factor 10^(0.4·A_λ) that removes Galactic extinction from fluxes.

    Multiply observed flux densities (and their errors) by it; A_λ is
    :func:`extinction_mag` (Cardelli, Clayton & Mathis 1989; O'Donnell
    1994; Fitzpatrick 1999).

    Parameters
    ----------
    wavelength_aa : float or array_like of float, or Quantity
        Wavelength(s) in Angstrom (or a spectral Quantity).
    ebv : float
        Colour excess E(B−V), mag.
    r_v : float, optional
        R_V = A_V / E(B−V) (default 3.1).
    law : {'ccm89', 'odonnell94', 'fitzpatrick99'}, optional
        Extinction law (default ``'ccm89'``).

    Returns
    -------
    ndarray of float
        Dimensionless factor >= 1, same shape as ``wavelength_aa``.

    Raises
    ------
    ExtinctionError
        As :func:`extinction_mag`.
    """
    return np.power(10.0, 0.4 * extinction_mag(wavelength_aa, ebv=ebv, r_v=r_v, law=law))
