"""Tests of lcstore.science.dust against REFERENCES §6 and the ``extinction`` package.

References: Cardelli, Clayton & Mathis (1989), O'Donnell (1994) and Fitzpatrick (1999)
as implemented by ``extinction`` 0.4.9 (extinction.ccm89, .odonnell94, .fitzpatrick99,
.remove); REFERENCES §6 worked values (R).
"""

import astropy.units as u
import extinction
import numpy as np
import pytest
from numpy.testing import assert_allclose

from lcstore.science.dust import (
    LAWS,
    VALID_RANGE_AA,
    ExtinctionError,
    deredden_factor,
    extinction_mag,
)

PACKAGE_LAWS = {
    "ccm89": extinction.ccm89,
    "odonnell94": extinction.odonnell94,
    "fitzpatrick99": extinction.fitzpatrick99,
}


@pytest.mark.parametrize(
    ("wavelength", "a_lambda"),
    [
        (3660.0, 0.4819),
        (4380.0, 0.4129),
        (5450.0, 0.3129),
        (6410.0, 0.2608),
        (7980.0, 0.1861),
        (12200.0, 0.0909),
        (21900.0, 0.0355),
    ],
)
def test_references_table_ccm89(wavelength, a_lambda):
    # REFERENCES §6 (R): E(B-V) = 0.1, R_V = 3.1, CCM89, single wavelengths (4 decimals).
    assert_allclose(extinction_mag(wavelength, ebv=0.1), a_lambda, atol=6e-5)


def test_a_v_is_r_v_times_ebv():
    # Cardelli et al. (1989): a(x) = 1, b(x) = 0 near 5494.5 Å, so A = A_V = R_V·E(B-V)
    # (stated in the extinction.ccm89 documentation).
    assert_allclose(extinction_mag(5494.5, ebv=0.2, r_v=2.5), 0.5, rtol=1e-3)


@pytest.mark.parametrize("law", LAWS)
@pytest.mark.parametrize(("ebv", "r_v"), [(0.02, 3.1), (0.3, 3.1), (0.5, 2.1), (1.0, 5.0)])
def test_matches_extinction_package(law, ebv, r_v):
    # Recomputed with extinction.<law>(wave, a_v = R_V·E(B-V), r_v) directly.
    lo, hi = VALID_RANGE_AA[law]
    wave = np.geomspace(lo, hi, 57)
    expected = PACKAGE_LAWS[law](wave, r_v * ebv, r_v)
    assert_allclose(extinction_mag(wave, ebv=ebv, r_v=r_v, law=law), expected, rtol=1e-12)


@pytest.mark.parametrize("law", LAWS)
def test_deredden_factor_matches_extinction_remove(law):
    # extinction.remove(A, flux) multiplies flux by 10**(0.4 A).
    wave = np.array([3660.0, 5450.0, 12200.0])
    a_lambda = PACKAGE_LAWS[law](wave, 3.1 * 0.25, 3.1)
    expected = extinction.remove(a_lambda, np.ones_like(wave))
    assert_allclose(deredden_factor(wave, ebv=0.25, law=law), expected, rtol=1e-12)


def test_zero_ebv_changes_nothing():
    assert_allclose(extinction_mag([4000.0, 20000.0], ebv=0.0), 0.0, atol=0)
    assert_allclose(deredden_factor([4000.0, 20000.0], ebv=0.0), 1.0, rtol=0)


def test_shapes_are_kept():
    scalar = extinction_mag(5450.0, ebv=0.1)
    assert isinstance(scalar, np.ndarray) and scalar.shape == ()
    grid = np.array([[3660.0, 4380.0], [6410.0, 21900.0]])
    values = extinction_mag(grid, ebv=0.1)
    assert values.shape == (2, 2)
    assert_allclose(values.ravel(), extinction.ccm89(grid.ravel(), 0.31, 3.1), rtol=1e-12)


def test_quantity_wavelengths_in_any_spectral_unit():
    # astropy spectral equivalencies: 545 nm, its frequency and its photon energy.
    wave = 545.0 * u.nm
    expected = extinction.ccm89(np.array([5450.0]), 0.31, 3.1)
    for quantity in (wave, wave.to(u.Hz, u.spectral()), wave.to(u.eV, u.spectral())):
        assert_allclose(extinction_mag(quantity, ebv=0.1), expected[0], rtol=1e-10)
    with pytest.raises(ExtinctionError, match="must be a length, frequency or energy"):
        extinction_mag(3.0 * u.kg, ebv=0.1)


@pytest.mark.parametrize("law", LAWS)
def test_range_edges_are_accepted(law):
    lo, hi = VALID_RANGE_AA[law]
    assert np.all(np.isfinite(extinction_mag([lo, hi], ebv=0.1, law=law)))


@pytest.mark.parametrize(
    ("law", "wavelength", "message"),
    [
        ("ccm89", 999.0, r"wavelength 999 Angstrom is outside the range of the ccm89"),
        ("ccm89", 33334.0, r"outside the range of the ccm89 extinction law \(1000-33333.3"),
        ("odonnell94", 500.0, "outside the range of the odonnell94"),
        ("fitzpatrick99", 900.0, r"outside the range of the fitzpatrick99 .*\(910-60000"),
        ("fitzpatrick99", 60001.0, "outside the range of the fitzpatrick99"),
        ("ccm89", float("nan"), "wavelength nan Angstrom is outside"),
        ("ccm89", -5000.0, "wavelength -5000 Angstrom is outside"),
    ],
)
def test_wavelength_out_of_range(law, wavelength, message):
    with pytest.raises(ExtinctionError, match=message):
        extinction_mag([5000.0, wavelength], ebv=0.1, law=law)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"ebv": 0.1, "law": "smc"}, r"unknown extinction law 'smc'; choose one of ccm89, "),
        ({"ebv": -0.01}, r"E\(B-V\) must be a finite number >= 0 mag, got -0.01"),
        ({"ebv": float("nan")}, r"E\(B-V\) must be a finite number"),
        ({"ebv": 0.1, "r_v": 0.0}, "R_V must be a finite positive number, got 0.0"),
        ({"ebv": 0.1, "r_v": -3.1}, "R_V must be a finite positive number"),
    ],
)
def test_bad_parameters(kwargs, message):
    with pytest.raises(ExtinctionError, match=message):
        extinction_mag(5000.0, **kwargs)
    with pytest.raises(ExtinctionError, match=message):
        deredden_factor(5000.0, **kwargs)


def test_extinction_error_is_a_value_error():
    assert issubclass(ExtinctionError, ValueError)
