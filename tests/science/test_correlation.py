"""Tests of lcstore.science.correlation (flux–flux pairs, coefficients, slopes)."""

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy import stats

from lcstore.science.correlation import flux_flux, ols_bisector_slope, pair_nearest

# REFERENCES §5 scipy oracle example
X_REF = np.arange(1.0, 11.0)
Y_REF = np.array([2, 1, 4, 3, 7, 8, 6, 9, 10, 12], dtype=float)


def _power_law_pairs(n: int, k: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    lx = rng.normal(0.0, 0.5, n)
    ly = 0.3 + k * lx + rng.normal(0.0, 0.3, n)
    return 10**lx, 10**ly


def test_coefficients_match_the_scipy_reference_values() -> None:
    # REFERENCES §5 (R, scipy 1.17): pearsonr 0.9463141 (p 3.4054e-5),
    # spearmanr 0.9393939 (p 5.484e-5), kendalltau 0.8222222 (p 3.577e-4).
    r = flux_flux(X_REF, Y_REF, n_boot=200)
    assert r["n_pairs"] == 10
    assert r["pearson_r"] == pytest.approx(0.9463141, abs=1e-7)
    assert r["pearson_p"] == pytest.approx(3.4054e-5, rel=1e-4)
    assert r["spearman_rho"] == pytest.approx(0.9393939, abs=1e-7)
    assert r["spearman_p"] == pytest.approx(5.484e-5, rel=1e-3)
    assert r["kendall_tau"] == pytest.approx(0.8222222, abs=1e-7)
    assert r["kendall_p"] == pytest.approx(3.577e-4, rel=1e-3)


def test_coefficients_recomputed_with_scipy() -> None:
    # scipy.stats pearsonr / spearmanr / kendalltau on the linear fluxes.
    x, y = _power_law_pairs(60, 1.4, seed=1)
    r = flux_flux(x, y, n_boot=100)
    for key, func in [
        ("pearson", stats.pearsonr),
        ("spearman", stats.spearmanr),
        ("kendall", stats.kendalltau),
    ]:
        ref = func(x, y)
        name = {"pearson": "pearson_r", "spearman": "spearman_rho", "kendall": "kendall_tau"}[key]
        assert r[name] == pytest.approx(ref.statistic, rel=1e-12)
        assert r[f"{key}_p"] == pytest.approx(ref.pvalue, rel=1e-9)


def test_ols_slope_matches_scipy_linregress() -> None:
    # scipy.stats.linregress on log10 fluxes: slope, intercept and both
    # standard errors.
    x, y = _power_law_pairs(80, 0.7, seed=2)
    r = flux_flux(x, y, n_boot=100)
    ref = stats.linregress(np.log10(x), np.log10(y))
    assert r["slope_ols"] == pytest.approx(ref.slope, rel=1e-12)
    assert r["intercept_ols"] == pytest.approx(ref.intercept, rel=1e-12)
    assert r["slope_ols_error"] == pytest.approx(ref.stderr, rel=1e-10)
    assert r["intercept_ols_error"] == pytest.approx(ref.intercept_stderr, rel=1e-10)


def test_bisector_slope_from_isobe_table_1() -> None:
    # Isobe et al. 1990 (ApJ 364, 104) Table 1, recomputed here from the two
    # OLS slopes given by numpy.polyfit (Y on X, and X on Y inverted to dY/dX).
    x, y = _power_law_pairs(100, 1.2, seed=3)
    lx, ly = np.log10(x), np.log10(y)
    b1 = np.polyfit(lx, ly, 1)[0]
    b2 = 1.0 / np.polyfit(ly, lx, 1)[0]
    expected = (b1 * b2 - 1 + np.sqrt((1 + b1**2) * (1 + b2**2))) / (b1 + b2)
    r = flux_flux(x, y, n_boot=100)
    assert r["slope"] == pytest.approx(expected, rel=1e-10)
    assert r["slope_bisector"] == r["slope"]
    assert r["intercept"] == pytest.approx(ly.mean() - expected * lx.mean(), rel=1e-10)
    # the bisector lies between the two OLS lines
    assert min(b1, b2) < r["slope"] < max(b1, b2)


def test_bisector_is_symmetric_under_swapping_the_bands() -> None:
    # Isobe et al. 1990: the OLS bisector treats X and Y alike, so the slope of
    # x on y is the reciprocal (k -> 1/k); OLS(Y|X) is not symmetric.
    x, y = _power_law_pairs(50, 0.8, seed=4)
    forward = flux_flux(x, y, n_boot=100)
    backward = flux_flux(y, x, n_boot=100)
    assert backward["slope"] == pytest.approx(1.0 / forward["slope"], rel=1e-12)
    assert backward["slope_ols"] != pytest.approx(1.0 / forward["slope_ols"], rel=1e-3)


def test_bisector_of_the_formula_for_exact_lines() -> None:
    # For a noiseless line both OLS slopes equal k and so does the bisector.
    assert_allclose(ols_bisector_slope([0.5, 1.0, 2.0], [0.5, 1.0, 2.0]), [0.5, 1.0, 2.0])


def test_bootstrap_error_matches_the_isobe_analytic_variance() -> None:
    # Isobe et al. 1990, Table 1: asymptotic variance of the OLS bisector slope
    # (formula written here from memory), compared with the bootstrap error
    # for many pairs.
    x, y = _power_law_pairs(400, 1.3, seed=5)
    r = flux_flux(x, y, n_boot=1500, rng=np.random.default_rng(6))
    lx, ly = np.log10(x), np.log10(y)
    dx, dy = lx - lx.mean(), ly - ly.mean()
    sxx, syy, sxy = dx @ dx, dy @ dy, dx @ dy
    b1, b2 = sxy / sxx, syy / sxy
    v1 = np.sum(dx**2 * (dy - b1 * dx) ** 2) / sxx**2
    v2 = np.sum(dy**2 * (dy - b2 * dx) ** 2) / sxy**2
    c12 = np.sum(dx * dy * (dy - b1 * dx) * (dy - b2 * dx)) / (b1 * sxx**2)
    b3 = r["slope"]
    var3 = (
        b3**2
        / ((b1 + b2) ** 2 * (1 + b1**2) * (1 + b2**2))
        * ((1 + b2**2) ** 2 * v1 + 2 * (1 + b1**2) * (1 + b2**2) * c12 + (1 + b1**2) ** 2 * v2)
    )
    assert r["slope_error"] == pytest.approx(np.sqrt(var3), rel=0.15)


def test_bootstrap_is_reproducible() -> None:
    x, y = _power_law_pairs(30, 1.0, seed=7)
    a = flux_flux(x, y, n_boot=300, rng=np.random.default_rng(1))
    b = flux_flux(x, y, n_boot=300, rng=np.random.default_rng(1))
    assert a["slope_error"] == b["slope_error"]
    assert flux_flux(x, y, n_boot=300)["slope_error"] == flux_flux(x, y, n_boot=300)["slope_error"]
    assert "bisector" in a["method"]


def test_bootstrap_in_chunks_equals_one_pass(monkeypatch: pytest.MonkeyPatch) -> None:
    import lcstore.science.correlation as corr

    x, y = _power_law_pairs(40, 1.0, seed=8)
    one = flux_flux(x, y, n_boot=50, rng=np.random.default_rng(2))
    monkeypatch.setattr(corr, "_BOOT_CHUNK", 100)  # 2 resamples per chunk
    chunked = flux_flux(x, y, n_boot=50, rng=np.random.default_rng(2))
    assert chunked["slope_error"] == pytest.approx(one["slope_error"], rel=1e-12)


def test_nonpositive_fluxes_are_left_out_of_the_log_fit_and_counted() -> None:
    x, y = _power_law_pairs(20, 1.0, seed=9)
    x2 = np.append(x, [0.0, 2.0])
    y2 = np.append(y, [1.0, -0.5])
    r = flux_flux(x2, y2, n_boot=100)
    ref = flux_flux(x, y, n_boot=100)
    assert r["n_pairs"] == 22
    assert r["n_log_pairs"] == 20
    assert r["n_nonpositive_excluded"] == 2
    assert r["slope"] == pytest.approx(ref["slope"], rel=1e-12)
    assert r["pearson_r"] == pytest.approx(stats.pearsonr(x2, y2).statistic, rel=1e-12)


@pytest.mark.parametrize(
    ("x", "y", "match"),
    [
        ([1.0, 2.0], [1.0, 2.0], "at least 3 pairs"),
        ([1.0, 2.0, 3.0, -1.0], [1.0, -2.0, 3.0, 4.0], "both fluxes positive"),
        ([1.0, 1.0, 1.0], [1.0, 2.0, 3.0], "constant"),
        ([1.0, np.nan, 3.0], [1.0, 2.0, 3.0], "finite"),
        ([1.0, 2.0, 3.0], [1.0, 2.0], "equal length"),
    ],
)
def test_flux_flux_rejects_unusable_input(x: list, y: list, match: str) -> None:
    with pytest.raises(ValueError, match=match):
        flux_flux(x, y, n_boot=10)


def _pair_nearest_brute(tx, ty, max_sep):  # type: ignore[no-untyped-def]
    """Direct implementation of the documented rule on small arrays."""
    chosen = {}
    for i, t in enumerate(tx):
        d = np.abs(ty - t)
        j = int(np.argmin(d))  # first minimum: the earlier y on a tie (ty sorted)
        if d[j] <= max_sep and (j not in chosen or d[j] < chosen[j][1]):
            chosen[j] = (i, d[j])
    pairs = sorted((i, j, d) for j, (i, d) in chosen.items())
    return (
        np.array([p[0] for p in pairs], dtype=int),
        np.array([p[1] for p in pairs], dtype=int),
        np.array([p[2] for p in pairs]),
    )


@pytest.mark.parametrize("max_sep", [0.05, 0.3, 10.0])
def test_pair_nearest_matches_a_brute_force_search(max_sep: float) -> None:
    rng = np.random.default_rng(10)
    tx = np.sort(rng.uniform(0, 20, 60))
    ty = np.sort(rng.uniform(0, 20, 45))
    ix, iy, sep = pair_nearest(tx, np.ones(60), ty, np.ones(45), max_separation=max_sep)
    bx, by, bsep = _pair_nearest_brute(tx, ty, max_sep)
    assert_array_equal(ix, bx)
    assert_array_equal(iy, by)
    assert_allclose(sep, bsep)
    assert np.all(sep <= max_sep)
    assert np.unique(iy).size == iy.size


def test_pair_nearest_skips_nan_values_and_handles_unsorted_y() -> None:
    tx = np.array([0.0, 1.0, 2.0])
    ty = np.array([2.1, 0.1, 1.05])
    y = np.array([1.0, 1.0, np.nan])
    ix, iy, sep = pair_nearest(tx, np.ones(3), ty, y, max_separation=0.5)
    assert_array_equal(ix, [0, 2])
    assert_array_equal(iy, [1, 0])
    assert_allclose(sep, [0.1, 0.1])
