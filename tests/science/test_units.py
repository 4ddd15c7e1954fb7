"""Tests of lcstore.science.units against astropy, scipy and REFERENCES.md §1-2.

Every expected number is either recomputed here with the reference library
named beside it (astropy units and equivalencies, scipy.integrate.quad) or is
a worked example of /work/shared/REFERENCES.md (tag R: itself computed with
astropy 8.0), compared with the tolerance stated there.
"""

from __future__ import annotations

import dataclasses
import math

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from numpy.testing import assert_allclose
from scipy.integrate import quad

from lcstore.science.units import (
    AB_ZERO_POINT_JY,
    BandSpec,
    ConversionError,
    canonical_unit,
    check_output_unit,
    energy_to_photon_flux,
    from_canonical,
    mag_to_mjy,
    mjy_to_mag,
    nufnu_from_photon_flux,
    photon_to_energy_flux,
    to_canonical,
)

ENERGY_FLUX = u.erg / (u.cm**2 * u.s)
F_NU_CGS = u.erg / (u.cm**2 * u.s * u.Hz)
F_LAMBDA_CGS = u.erg / (u.cm**2 * u.s * u.AA)
KEV_TO_ERG = (1 * u.keV).to_value(u.erg)  # astropy, CODATA 2022

# Vega-based bands with the zero points and effective wavelengths of Bessell,
# Castelli & Plez 1998, A&A 333, 231, Table A2 (REFERENCES §1, tag C).
V_BAND = BandSpec("v-inv", "flux_density", 5450.0, "Vega", 3636.0)
B_BAND = BandSpec("b-inv", "flux_density", 4380.0, "Vega", 4063.0)
R_BAND = BandSpec("r-inv", "flux_density", 6410.0, "Vega", 3064.0)
AB_BAND = BandSpec("g-inv", "flux_density", 4800.0, "AB")
NOSYS_BAND = BandSpec("radio-inv", "flux_density", 2.0e8)
NOLAMBDA_BAND = BandSpec("fnu-inv", "flux_density")
# Integrated bands of REFERENCES §2: 0.1-300 GeV with pivot 1 GeV, and 2-10 keV.
GAMMA_BAND = BandSpec(
    "gamma-inv",
    "photon_flux",
    energy_min_kev=1.0e5,
    energy_max_kev=3.0e8,
    pivot_energy_kev=1.0e6,
    photon_index=2.4,
)
XRAY_BAND = BandSpec(
    "xray-inv", "energy_flux", energy_min_kev=2.0, energy_max_kev=10.0, photon_index=2.0
)
COUNT_BAND = BandSpec(
    "xcounts-inv",
    "count_rate",
    energy_min_kev=0.3,
    energy_max_kev=10.0,
    photon_index=1.7,
    counts_to_energy_flux=3.5e-11,
)


def _quad_power_law(
    e1: float, e2: float, e0: float, gamma: float, k: float = 1.0
) -> tuple[float, float]:
    """Photon flux and energy flux (keV) of K (E/E0)^-Gamma by numerical integration.

    scipy.integrate.quad in ln E (the integrand is smooth there over decades).
    """

    def n_e(e: float) -> float:
        return k * (e / e0) ** (-gamma)

    photons, _ = quad(lambda y: n_e(math.exp(y)) * math.exp(y), math.log(e1), math.log(e2))
    energy, _ = quad(lambda y: n_e(math.exp(y)) * math.exp(2 * y), math.log(e1), math.log(e2))
    return photons, energy


# --- canonical units and band properties -------------------------------------


@pytest.mark.parametrize(
    ("kind", "unit"),
    [
        ("flux_density", u.mJy),
        ("energy_flux", ENERGY_FLUX),
        ("photon_flux", u.ph / (u.cm**2 * u.s)),
        ("count_rate", u.ct / u.s),
    ],
)
def test_canonical_unit(kind: str, unit: u.UnitBase) -> None:
    # DESIGN.md §3 storage conventions.
    assert canonical_unit(kind) == unit


def test_pivot_and_frequency() -> None:
    # Geometric mean pivot (DESIGN.md Band record); frequencies from astropy's spectral()
    # equivalency; REFERENCES §2: 1 keV <-> 2.417989242e17 Hz (CODATA 2022).
    band = dataclasses.replace(XRAY_BAND, pivot_energy_kev=None)
    assert band.pivot_kev == pytest.approx(math.sqrt(20.0))
    one_kev = dataclasses.replace(XRAY_BAND, pivot_energy_kev=1.0)
    assert one_kev.frequency_hz() == pytest.approx(2.417989242e17, rel=1e-9)
    assert R_BAND.frequency_hz() == pytest.approx(
        (6410 * u.AA).to_value(u.Hz, u.spectral()), rel=1e-12
    )
    assert NOLAMBDA_BAND.frequency_hz() is None
    assert BandSpec("x", "energy_flux").pivot_kev is None


# --- magnitudes (REFERENCES §1) ------------------------------------------------


def test_ab_zero_point_from_astropy() -> None:
    # REFERENCES §1 (Oke & Gunn 1983): 0 AB = 3630.78 Jy (astropy u.ABmag), 1 mJy = 16.400 AB.
    assert AB_ZERO_POINT_JY == pytest.approx(u.ABmag.to(u.Jy, 0.0), rel=1e-12)
    assert AB_ZERO_POINT_JY == pytest.approx(3630.78, abs=0.01)
    mag, _, label = from_canonical([1.0], [np.nan], "ABmag", V_BAND)
    assert_allclose(mag, 16.400, atol=5e-4)
    assert label == "mag(AB)"
    # The band's own AB system with no zero point uses astropy's, for any flux.
    flux = np.array([1e-3, 0.37, 1.0, 52.0, 3.1e4])
    expected = (flux * u.mJy).to_value(u.ABmag)  # astropy
    assert_allclose(from_canonical(flux, None, "mag", AB_BAND)[0], expected, rtol=0, atol=1e-12)
    assert_allclose(from_canonical(flux, None, "mag(AB)", V_BAND)[0], expected, atol=1e-12)
    back, _ = to_canonical(expected, None, "ABmag", V_BAND)
    assert_allclose(back, flux, rtol=1e-12)


@pytest.mark.parametrize(
    ("band", "mag", "mjy"),
    [
        (V_BAND, 15.0, 3.636),  # REFERENCES §1 worked: V = 15 -> 3.636 mJy
        (B_BAND, 15.0, 4.063),  # B = 15 -> 4.063 mJy
        (R_BAND, 14.0, 7.6964),  # R = 14 -> 7.6964e-26 erg s-1 cm-2 Hz-1
    ],
)
def test_vega_worked_examples(band: BandSpec, mag: float, mjy: float) -> None:
    # REFERENCES §1 (tag R, rtol 1e-3); zero points of Bessell et al. 1998 Table A2.
    flux, _ = to_canonical([mag], [0.0], "mag", band)
    assert_allclose(flux, mjy, rtol=1e-3)
    # Same flux recomputed with astropy quantities: ZP x 10^(-0.4 m).
    assert_quantity_allclose(
        flux[0] * u.mJy, (band.zero_point_jy * u.Jy * 10 ** (-0.4 * mag)).to(u.mJy), rtol=1e-12
    )
    back, _, label = from_canonical(flux, None, "mag", band)
    assert_allclose(back, mag, atol=1e-12)
    assert label == "mag"


def test_b_band_in_ab() -> None:
    # REFERENCES §1 worked: B = 15 (Vega) -> 4.063 mJy = 14.878 AB; astropy u.ABmag.
    flux, _ = to_canonical([15.0], None, "mag", B_BAND)
    ab, _, _ = from_canonical(flux, None, "ABmag", B_BAND)
    assert_allclose(ab, 14.878, atol=5e-4)
    assert_allclose(ab, (flux * u.mJy).to_value(u.ABmag), atol=1e-12)


def test_r_band_cgs_frequency_and_nufnu() -> None:
    # REFERENCES §1 worked: R = 14 -> 7.6964e-26 erg s-1 cm-2 Hz-1, nu = 4.6769e14 Hz,
    # nu F_nu = 3.5996e-11 erg s-1 cm-2 (rtol 1e-3); recomputed with astropy spectral_density.
    flux, _ = to_canonical([14.0], None, "mag", R_BAND)
    fnu, _, label = from_canonical(flux, None, "erg/(cm2 s Hz)", R_BAND)
    assert label == "erg/(cm2 s Hz)"
    assert_allclose(fnu, 7.6964e-26, rtol=1e-3)
    assert_allclose(R_BAND.frequency_hz(), 4.6769e14, rtol=1e-3)
    nufnu, _, label = from_canonical(flux, None, "nufnu", R_BAND)
    assert_allclose(nufnu, 3.5996e-11, rtol=1e-3)
    expected = (flux[0] * u.mJy).to(ENERGY_FLUX, u.spectral_density(6410 * u.AA))
    assert_quantity_allclose(nufnu[0] * ENERGY_FLUX, expected, rtol=1e-12)
    assert u.Unit(label) == ENERGY_FLUX
    # erg/(cm2 s) on a flux-density band is the same nu F_nu at lambda_eff.
    assert_allclose(from_canonical(flux, None, "erg/(cm2 s)", R_BAND)[0], nufnu, rtol=1e-12)


def test_average_in_flux_not_magnitude() -> None:
    # REFERENCES §1 worked: 15.0 and 16.0 mag averaged in flux = 15.3887 mag, not 15.5.
    flux = mag_to_mjy([15.0, 16.0], 3636.0)
    assert_allclose(mjy_to_mag(flux.mean(), 3636.0), 15.3887, atol=1e-4)


def test_magnitude_error_propagation_against_astropy_derivative() -> None:
    # sigma_f = f 0.4 ln10 sigma_m and sigma_m = 2.5/ln10 sigma_f/f (first order) against
    # a central difference of astropy's ABmag <-> mJy conversion.
    mag = np.array([12.0, 16.4, 21.3])
    sigma_m = np.array([0.01, 0.05, 0.2])
    flux, sigma_f = to_canonical(mag, sigma_m, "ABmag", NOSYS_BAND)
    h = 1e-6
    dfdm = ((mag + h) * u.ABmag).to_value(u.mJy) - ((mag - h) * u.ABmag).to_value(u.mJy)
    assert_allclose(sigma_f, np.abs(dfdm / (2 * h)) * sigma_m, rtol=1e-6)
    back_m, back_sigma, _ = from_canonical(flux, sigma_f, "ABmag", NOSYS_BAND)
    assert_allclose(back_m, mag, atol=1e-12)
    assert_allclose(back_sigma, sigma_m, rtol=1e-12)
    f = flux * (1 + 1e-7)
    dmdf = ((f * u.mJy).to_value(u.ABmag) - (flux * u.mJy).to_value(u.ABmag)) / (f - flux)
    assert_allclose(back_sigma, np.abs(dmdf) * sigma_f, rtol=1e-5)


def test_non_positive_flux_has_no_magnitude() -> None:
    mag, err, _ = from_canonical([-1.0, 0.0, np.nan, 1.0], [0.1, 0.1, 0.1, 0.1], "mag", V_BAND)
    assert np.isnan(mag[:3]).all() and np.isnan(err[:3]).all()
    assert np.isfinite(mag[3]) and np.isfinite(err[3])


@pytest.mark.parametrize(
    ("band", "unit"),
    [(V_BAND, "mag"), (V_BAND, "mJy"), (XRAY_BAND, "ph/(cm2 s)"), (GAMMA_BAND, "nufnu")],
)
def test_nan_errors_stay_nan(band: BandSpec, unit: str) -> None:
    values = np.array([1.0, 2.0, 3.0])
    errors = np.array([np.nan, 0.1, np.nan])
    v, e = to_canonical(values, errors, unit, band)
    assert np.isnan(e[[0, 2]]).all() and np.isfinite(e[1]) and np.isfinite(v).all()
    _, e2, _ = from_canonical(v, e, unit, band)
    assert np.isnan(e2[[0, 2]]).all()
    assert_allclose(e2[1], 0.1, rtol=1e-12)
    assert np.isnan(to_canonical(values, None, unit, band)[1]).all()


# --- spectral flux densities (astropy spectral_density) -----------------------


@pytest.mark.parametrize(
    "unit",
    [
        "Jy",
        "mJy",
        "erg/(cm2 s Hz)",
        "W/(m2 Hz)",
        "erg/(cm2 s AA)",
        "W/(m2 um)",
        "ph/(cm2 s AA)",
        "erg/(cm2 s)",
    ],
)
def test_flux_density_units_against_spectral_density(unit: str) -> None:
    # astropy u.spectral_density at lambda_eff is the reference for every F_nu/F_lambda/nuFnu.
    lam = V_BAND.wavelength_eff_aa * u.AA
    given = np.array([3.2, 0.7, 11.0]) * (1 * u.mJy).to(u.Unit(unit), u.spectral_density(lam))
    sigma = 0.05 * given
    v, e = to_canonical(given.value, sigma.value, unit, V_BAND)
    assert_quantity_allclose(v * u.mJy, given.to(u.mJy, u.spectral_density(lam)), rtol=1e-12)
    assert_quantity_allclose(e * u.mJy, sigma.to(u.mJy, u.spectral_density(lam)), rtol=1e-12)
    back, back_err, label = from_canonical(v, e, unit, V_BAND)
    assert_allclose(back, given.value, rtol=1e-12)
    assert_allclose(back_err, sigma.value, rtol=1e-12)
    assert label == unit


def test_f_nu_needs_no_wavelength() -> None:
    # Pure F_nu unit changes (astropy unit conversion); no lambda_eff required.
    v, _ = to_canonical([2.0], None, "W/(m2 Hz)", NOLAMBDA_BAND)
    assert_quantity_allclose(v * u.mJy, (2.0 * u.W / (u.m**2 * u.Hz)).to(u.mJy), rtol=1e-12)


# --- power-law integrated fluxes (REFERENCES §2) -----------------------------


@pytest.mark.parametrize(
    "gamma", [0.5, 1.0, 1.0 + 1e-10, 1.0 + 1e-7, 1.7, 2.0, 2.0 - 1e-10, 2.4, 3.1]
)
@pytest.mark.parametrize(("e1", "e2"), [(2.0, 10.0), (0.3, 10.0), (1.0e5, 3.0e8)])
def test_power_law_against_quad(gamma: float, e1: float, e2: float) -> None:
    # REFERENCES §2: every formula checked with scipy.integrate.quad, including Gamma = 1, 2
    # exactly (log branches) and within 1e-10 of them.
    e0 = math.sqrt(e1 * e2) * 1.7  # any pivot; S/F must not depend on it
    photons, energy = _quad_power_law(e1, e2, e0, gamma)
    flux = np.array([photons, 2 * photons])
    assert_allclose(
        photon_to_energy_flux(flux, e1, e2, gamma), flux / photons * energy * KEV_TO_ERG, rtol=1e-9
    )
    assert_allclose(
        energy_to_photon_flux(flux / photons * energy * KEV_TO_ERG, e1, e2, gamma), flux, rtol=1e-9
    )
    # nu F_nu(E) = E^2 N(E) with K = 1 for the photon flux `photons`.
    for e in (e1, e0, e2):
        assert_allclose(
            nufnu_from_photon_flux(photons, e1, e2, gamma, e),
            e**2 * (e / e0) ** (-gamma) * KEV_TO_ERG,
            rtol=1e-9,
        )


@pytest.mark.parametrize(
    ("gamma", "energy_flux", "nufnu_pivot"),
    [(2.4, 5.3797e-10, 8.9299e-11), (2.0, 1.28319e-9, 1.60271e-10)],
)
def test_gamma_ray_worked_examples(gamma: float, energy_flux: float, nufnu_pivot: float) -> None:
    # REFERENCES §2 worked (tag R): F = 1e-6 ph cm-2 s-1 over 0.1-300 GeV, E0 = 1 GeV.
    band = dataclasses.replace(GAMMA_BAND, photon_index=gamma)
    s, s_err, _ = from_canonical([1e-6], [1e-7], "erg/(cm2 s)", band)
    assert_allclose(s, energy_flux, rtol=1e-4)
    assert_allclose(s_err, 0.1 * s, rtol=1e-12)  # linear: errors scale alike
    nufnu, _, _ = from_canonical([1e-6], None, "nufnu", band)
    assert_allclose(nufnu, nufnu_pivot, rtol=1e-4)
    assert_allclose(photon_to_energy_flux(1e-6, 1e5, 3e8, gamma), energy_flux, rtol=1e-4)
    assert_allclose(nufnu_from_photon_flux(1e-6, 1e5, 3e8, gamma, 1e6), nufnu_pivot, rtol=1e-4)
    # And back: the energy flux as input of the photon-flux band.
    ph, _ = to_canonical(s, None, "erg/(cm2 s)", band)
    assert_allclose(ph, 1e-6, rtol=1e-12)


def test_xray_worked_example() -> None:
    # REFERENCES §2 worked: 2-10 keV, F = 0.01 ph cm-2 s-1, Gamma = 2 -> S = 6.4465e-11.
    s, _ = to_canonical([0.01], None, "ph/(cm2 s)", XRAY_BAND)
    assert_allclose(s, 6.4465e-11, rtol=1e-4)
    assert_allclose(to_canonical([0.01], None, "1/(cm2 s)", XRAY_BAND)[0], s, rtol=1e-12)
    ph, _, label = from_canonical(s, None, "ph/(m2 s)", XRAY_BAND)
    assert_allclose(ph, 0.01 * 1e4, rtol=1e-12)  # astropy: 1 m2 = 1e4 cm2
    assert label == "ph/(m2 s)"
    assert_allclose(to_canonical([1.0], None, "W/m2", XRAY_BAND)[0], u.W.to(u.erg / u.s) * 1e-4)


def test_energy_band_nufnu_at_pivot() -> None:
    # nu F_nu(E0) = K E0^2 with K from the band's energy flux (REFERENCES §2 formulas via quad).
    e0 = XRAY_BAND.pivot_kev
    photons, energy = _quad_power_law(2.0, 10.0, e0, 2.0)
    s = 1e-11
    k = s / (energy * KEV_TO_ERG)
    nufnu, _, _ = from_canonical([s], None, "nufnu", XRAY_BAND)
    assert_allclose(nufnu, k * e0**2 * KEV_TO_ERG, rtol=1e-9)
    assert_allclose(to_canonical(nufnu, None, "nufnu", XRAY_BAND)[0], s, rtol=1e-12)


def test_count_rate_conversions() -> None:
    # counts_to_energy_flux is a plain factor (DESIGN.md Band record); ct/ks via astropy.
    s, e = to_canonical([2.0], [0.2], "ct/s", COUNT_BAND)
    assert_allclose(s, 2.0, rtol=1e-12)
    assert_allclose(e, 0.2, rtol=1e-12)
    assert_allclose(to_canonical([2000.0], None, "ct/ks", COUNT_BAND)[0], 2.0, rtol=1e-12)
    energy, _, _ = from_canonical([2.0], None, "erg/(cm2 s)", COUNT_BAND)
    assert_allclose(energy, 2.0 * 3.5e-11, rtol=1e-12)
    assert_allclose(to_canonical(energy, None, "erg/(cm2 s)", COUNT_BAND)[0], 2.0, rtol=1e-12)
    # nufnu of a count-rate band: to energy flux, then as an energy-flux band.
    as_energy = BandSpec(
        "x", "energy_flux", energy_min_kev=0.3, energy_max_kev=10.0, photon_index=1.7
    )
    expected = from_canonical(energy, None, "nufnu", as_energy)[0]
    assert_allclose(from_canonical([2.0], None, "nufnu", COUNT_BAND)[0], expected, rtol=1e-12)
    # An energy-flux band may take count rates when it has the factor.
    with_factor = dataclasses.replace(as_energy, counts_to_energy_flux=3.5e-11)
    assert_allclose(to_canonical([2.0], None, "ct/s", with_factor)[0], 7e-11, rtol=1e-12)


# --- every ConversionError path --------------------------------------------------

NO_GAMMA = dataclasses.replace(XRAY_BAND, photon_index=None)
NO_RANGE = BandSpec("xr-inv", "energy_flux", photon_index=2.0)
BAD_RANGE = dataclasses.replace(XRAY_BAND, energy_min_kev=10.0, energy_max_kev=2.0)
VEGA_NO_ZP = dataclasses.replace(V_BAND, zero_point_jy=None)
COUNT_NO_FACTOR = dataclasses.replace(COUNT_BAND, counts_to_energy_flux=None)


@pytest.mark.parametrize(
    ("band", "unit", "match"),
    [
        (BandSpec("odd", "bogus"), "mJy", "band 'odd': unknown band kind 'bogus'"),
        (V_BAND, "", "band 'v-inv': no unit given"),
        (V_BAND, "flux_of_hope", "unit 'flux_of_hope' is not a unit astropy understands"),
        (V_BAND, "mag(ST)", "for magnitudes use 'mag' or 'ABmag'"),
        (GAMMA_BAND, "mag", "band 'gamma-inv' is an energy band and has no magnitude"),
        (XRAY_BAND, "ABmag", "band 'xray-inv' is an energy band and has no magnitude"),
        (COUNT_BAND, "mag", "is a count-rate band and has no magnitude"),
        (VEGA_NO_ZP, "mag", "Vega magnitudes need the band's zero point"),
        (NOSYS_BAND, "mag", "band has no magnitude system"),
        (NOLAMBDA_BAND, "erg/(cm2 s AA)", "needs the band's effective wavelength"),
        (NOLAMBDA_BAND, "nufnu", "nufnu needs the band's effective wavelength"),
        (V_BAND, "ct/s", "'ct/s' is not a spectral flux density"),
        (V_BAND, "ph/(cm2 s)", "is not a spectral flux density"),
        (NO_GAMMA, "ph/(cm2 s)", "needs the band's photon index"),
        (NO_RANGE, "ph/(cm2 s)", "needs the band's energy range"),
        (BAD_RANGE, "ph/(cm2 s)", r"energy range 10.0-2.0 keV is not 0 < min < max"),
        (XRAY_BAND, "ct/s", "needs the band's counts_to_energy_flux"),
        (XRAY_BAND, "mJy", "is not an energy flux, photon flux or count rate"),
        (GAMMA_BAND, "ct/s", "is not a photon flux or an energy flux"),
        (dataclasses.replace(GAMMA_BAND, photon_index=None), "erg/(cm2 s)", "photon index"),
        (dataclasses.replace(GAMMA_BAND, photon_index=None), "nufnu", "nufnu needs .* photon"),
        (COUNT_BAND, "ph/(cm2 s)", "is not a count rate"),
        (COUNT_NO_FACTOR, "erg/(cm2 s)", "needs the band's counts_to_energy_flux"),
        (COUNT_NO_FACTOR, "nufnu", "nufnu needs the band's counts_to_energy_flux"),
    ],
)
def test_conversion_errors(band: BandSpec, unit: str, match: str) -> None:
    with pytest.raises(ConversionError, match=match):
        check_output_unit(unit, band)
    with pytest.raises(ConversionError, match=match):
        to_canonical([1.0], [0.1], unit, band)
    with pytest.raises(ConversionError, match=match):
        from_canonical([1.0], [0.1], unit, band)


def test_check_output_unit_accepts_valid_units() -> None:
    for band, unit in [
        (V_BAND, "mag"),
        (V_BAND, "ABmag"),
        (V_BAND, "erg/(cm2 s AA)"),
        (GAMMA_BAND, "nufnu"),
        (GAMMA_BAND, "erg/(cm2 s)"),
        (COUNT_BAND, "ct/ks"),
    ]:
        assert check_output_unit(unit, band) is None


def test_unknown_kind_and_bad_helper_ranges() -> None:
    with pytest.raises(ConversionError, match="unknown band kind 'radio'"):
        canonical_unit("radio")
    with pytest.raises(ValueError, match="0 < e_min_kev < e_max_kev"):
        photon_to_energy_flux(1.0, 10.0, 2.0, 2.0)
    with pytest.raises(ValueError, match="energy_kev must be positive"):
        nufnu_from_photon_flux(1.0, 2.0, 10.0, 2.0, 0.0)
    with pytest.raises(ValueError, match="photon index must be finite"):
        energy_to_photon_flux(1.0, 2.0, 10.0, np.nan)
