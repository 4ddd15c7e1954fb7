"""Tests of lcstore.science.variability (F_var, chi-square against a constant)."""

import numpy as np
import pytest
from scipy import stats

from lcstore.science.variability import variability_summary

FLUX = np.array([10, 12, 11, 13, 9, 10, 14, 12], dtype=float)


def test_fvar_worked_example() -> None:
    # REFERENCES §5 (R): Vaughan et al. 2003 eq. 10 and B2,
    # f = [10, 12, 11, 13, 9, 10, 14, 12], sigma = 0.5 -> 0.141462 ± 0.015912.
    r = variability_summary(FLUX, np.full(8, 0.5))
    assert r["fvar_defined"] is True
    assert r["fvar_note"] is None
    assert r["fvar"] == pytest.approx(0.141462, abs=5e-7)
    assert r["fvar_error"] == pytest.approx(0.015912, abs=5e-7)
    # excess variance (Vaughan et al. 2003, eq. 8) with numpy's ddof=1 variance
    assert r["excess_variance"] == pytest.approx(np.var(FLUX, ddof=1) - 0.25, rel=1e-12)
    assert r["mean"] == pytest.approx(FLUX.mean())
    assert r["max_min_ratio"] == pytest.approx(14 / 9)


def test_weighted_mean_worked_example() -> None:
    # REFERENCES §4 (Bevington & Robinson eqs. 4.17-4.19, numbers M):
    # 10 ± 1 and 12 ± 2 -> 10.4 ± 0.894427.
    r = variability_summary([10.0, 12.0], [1.0, 2.0])
    assert r["weighted_mean"] == pytest.approx(10.4, rel=1e-12)
    assert r["weighted_mean_error"] == pytest.approx(0.894427, rel=1e-6)


def test_chi2_and_p_value_against_scipy() -> None:
    # chi-square about the weighted mean; p from scipy.stats.chi2.sf with
    # dof = n - 1, and equal to 1 - cdf.
    rng = np.random.default_rng(0)
    err = rng.uniform(0.5, 1.5, 25)
    flux = 20.0 + err * rng.standard_normal(25)
    r = variability_summary(flux, err)
    mean_w = np.average(flux, weights=err**-2)
    chi2 = np.sum(((flux - mean_w) / err) ** 2)
    assert r["dof"] == 24
    assert r["chi2"] == pytest.approx(chi2, rel=1e-12)
    assert r["chi2_p"] == pytest.approx(stats.chi2.sf(chi2, 24), rel=1e-12)
    assert r["chi2_p"] == pytest.approx(1 - stats.chi2.cdf(chi2, 24), rel=1e-9)


def test_fvar_undefined_below_the_noise() -> None:
    # Vaughan et al. 2003: S² < <sigma²> leaves F_var undefined; no absolute value.
    r = variability_summary([10.0, 10.1, 9.9, 10.0], [1.0, 1.0, 1.0, 1.0])
    assert r["excess_variance"] < 0
    assert r["fvar"] is None
    assert r["fvar_error"] is None
    assert r["fvar_defined"] is False
    assert "undefined" in r["fvar_note"]
    assert r["chi2_p"] > 0.99


def test_fvar_zero_excess_has_no_error() -> None:
    # [0, 1, 2]: S² = 1 (ddof = 1) equals <sigma²> = 1 exactly, so F_var = 0 and
    # the B2 error (which divides by F_var) diverges.
    r = variability_summary([0.0, 1.0, 2.0], [1.0, 1.0, 1.0])
    assert r["excess_variance"] == 0.0
    assert r["fvar"] == 0.0
    assert r["fvar_error"] is None
    assert "diverges" in r["fvar_note"]


def test_max_min_ratio_needs_positive_fluxes() -> None:
    r = variability_summary([-1.0, 2.0, 3.0], [0.1, 0.1, 0.1])
    assert r["max_min_ratio"] is None


@pytest.mark.parametrize(
    ("value", "error", "match"),
    [
        ([1.0], [0.1], "at least 2"),
        ([1.0, 2.0], [0.1, 0.0], "positive"),
        ([1.0, np.nan], [0.1, 0.1], "finite"),
        ([1.0, 2.0], [0.1], "equally long"),
    ],
)
def test_variability_summary_rejects_bad_input(value: list, error: list, match: str) -> None:
    with pytest.raises(ValueError, match=match):
        variability_summary(value, error)
