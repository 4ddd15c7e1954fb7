"""Tests of lcstore.science.lags (DCF, local DCF, ZDCF, ICCF, peaks, FR/RSS, significance).

Sign convention under test everywhere: curve b is curve a delayed by +LAG days,
so every estimator must peak at a positive lag.
"""

import io
import os
import subprocess
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy import stats

import lcstore.science.lags as lags_module
from lcstore.science.lags import (
    LagFunction,
    dcf,
    iccf,
    lag_significance,
    lag_uncertainty,
    peak_and_centroid,
    zdcf,
)
from lcstore.science.simulate import red_noise

LAG = 15.0
ROOT = Path(__file__).resolve().parents[2]


def _lagged_pair(
    n_a: int, n_b: int, span: float, seed: int, *, lag: float = LAG, noise: float = 0.05
) -> tuple[np.ndarray, ...]:
    """Curve a samples a beta = 1 red-noise signal s(t); curve b samples s(t - lag)."""
    rng = np.random.default_rng(seed)
    grid = np.arange(-100.0, span + 100.0, 0.25)
    signal = red_noise(grid.size, 0.25, 1.0, rng=rng)
    ta = np.sort(rng.uniform(0.0, span, n_a))
    tb = np.sort(rng.uniform(0.0, span, n_b))
    a = np.interp(ta, grid, signal) + noise * rng.standard_normal(n_a)
    b = np.interp(tb - lag, grid, signal) + noise * rng.standard_normal(n_b)
    return ta, a, np.full(n_a, noise), tb, b, np.full(n_b, noise)


@pytest.fixture(scope="module")
def lagged() -> tuple[np.ndarray, ...]:
    return _lagged_pair(400, 400, 500.0, seed=0)


# --------------------------------------------------------------------------- DCF


def _dcf_brute(ta, a, ea, tb, b, eb, lf: LagFunction, local: bool):  # type: ignore[no-untyped-def]
    """All N·M pairs, binned with the edges of ``lf`` (Edelson & Krolik 1988 eq. 2-4)."""
    dt = tb[None, :] - ta[:, None]
    ia, jb = np.nonzero(np.ones_like(dt, dtype=bool))
    dt = dt.ravel()
    coef, err, n, pearson = [], [], [], []
    for lo, hi in zip(lf.lag_lo, lf.lag_hi, strict=True):
        sel = (dt >= lo) & (dt < hi)
        x, y = a[ia[sel]], b[jb[sel]]
        n.append(sel.sum())
        if local:
            u = (x - x.mean()) * (y - y.mean()) / (x.std() * y.std()) if x.size else x
        else:
            norm = np.sqrt((a.var() - np.mean(ea**2)) * (b.var() - np.mean(eb**2)))
            u = (x - a.mean()) * (y - b.mean()) / norm
        coef.append(u.mean() if u.size else np.nan)
        err.append(np.sqrt(np.sum((u - u.mean()) ** 2)) / (u.size - 1) if u.size > 1 else np.nan)
        pearson.append(stats.pearsonr(x, y).statistic if x.size > 2 else np.nan)
    return np.array(coef), np.array(err), np.array(n), np.array(pearson)


def test_dcf_at_zero_lag_equals_pearson_r_for_the_same_time_stamps() -> None:
    # REFERENCES §5 identity: same time stamps, no errors, lag 0 -> DCF = Pearson r
    # (scipy.stats.pearsonr; variances with ddof = 0 as in the DCF definition).
    rng = np.random.default_rng(1)
    t = np.sort(rng.choice(np.arange(1000.0), 120, replace=False))
    a = rng.standard_normal(120)
    b = 0.6 * a + rng.standard_normal(120)
    lf = dcf(t, a, None, t, b, None, lag_min=0.0, lag_max=0.0, lag_step=0.5)
    assert lf.n_pairs.tolist() == [120]
    assert lf.coefficient[0] == pytest.approx(stats.pearsonr(a, b).statistic, rel=1e-12)


def test_dcf_error_term_rescales_pearson_r_and_is_not_clipped() -> None:
    # Edelson & Krolik 1988: the normalisation is sqrt((σa² - <ea²>)(σb² - <eb²>)),
    # so DCF(0) = r σa σb / sqrt(...) — for identical noisy curves this exceeds 1
    # and must not be clipped (REFERENCES §5).
    rng = np.random.default_rng(2)
    t = np.arange(0.0, 200.0, 1.0)
    a = rng.standard_normal(200)
    ea = np.full(200, 0.5)
    b = 0.8 * a + 0.3 * rng.standard_normal(200)
    eb = np.full(200, 0.2)
    lf = dcf(t, a, ea, t, b, eb, lag_min=0.0, lag_max=0.0, lag_step=0.5)
    factor = a.std() * b.std() / np.sqrt((a.var() - 0.25) * (b.var() - 0.04))
    assert lf.coefficient[0] == pytest.approx(stats.pearsonr(a, b).statistic * factor, rel=1e-12)
    same = dcf(t, a, ea, t, a, ea, lag_min=0.0, lag_max=0.0, lag_step=0.5)
    assert same.coefficient[0] == pytest.approx(a.var() / (a.var() - 0.25), rel=1e-12)
    assert same.coefficient[0] > 1.0


@pytest.mark.parametrize("chunk", [None, 97])
@pytest.mark.parametrize("local", [False, True])
def test_dcf_windowed_pairs_match_brute_force(
    local: bool, chunk: int | None, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Brute-force N·M implementation of the published definitions, written in
    # this test; the local DCF (Welsh 1999) must also equal scipy.stats.pearsonr
    # of each bin's pairs.  chunk=97 forces many pair chunks.
    if chunk is not None:
        monkeypatch.setattr(lags_module, "_PAIR_CHUNK", chunk)
    ta, a, ea, tb, b, eb = _lagged_pair(70, 55, 100.0, seed=3, noise=0.1)
    lf = dcf(ta, a, ea, tb, b, eb, lag_min=-30.0, lag_max=31.0, lag_step=1.5, local=local)
    coef, err, n, pearson = _dcf_brute(ta, a, ea, tb, b, eb, lf, local)
    assert_allclose(lf.lag, -30.0 + 1.5 * np.arange(41))
    assert_allclose(lf.lag_hi - lf.lag_lo, 1.5)
    assert_array_equal(lf.n_pairs, n)
    assert_allclose(lf.coefficient, coef, rtol=1e-10, atol=1e-12)
    assert_allclose(lf.error, err, rtol=1e-9, atol=1e-12)
    assert_array_equal(lf.error_lo, lf.error)
    if local:
        assert_allclose(lf.coefficient[n > 2], pearson[n > 2], rtol=1e-10)


@pytest.mark.parametrize("local", [False, True])
def test_dcf_recovers_an_injected_lag(lagged: tuple, local: bool) -> None:
    lf = dcf(*lagged, lag_min=-50.0, lag_max=50.0, lag_step=2.0, local=local)
    peak, centroid = peak_and_centroid(lf)
    assert abs(peak - LAG) <= 2.0
    assert abs(centroid - LAG) <= 2.0


def test_dcf_refuses_noise_dominated_curves() -> None:
    t = np.arange(20.0)
    a = np.random.default_rng(4).standard_normal(20)
    with pytest.raises(ValueError, match="not above the noise"):
        dcf(t, a, np.full(20, 5.0), t, a, None, lag_min=-5, lag_max=5, lag_step=1)


@pytest.mark.parametrize(
    ("grid", "match"),
    [
        (dict(lag_min=0.0, lag_max=10.0, lag_step=0.0), "lag_step must be positive"),
        (dict(lag_min=5.0, lag_max=0.0, lag_step=1.0), "must not be below"),
    ],
)
def test_dcf_rejects_bad_lag_grids(grid: dict, match: str) -> None:
    t = np.arange(10.0)
    with pytest.raises(ValueError, match=match):
        dcf(t, t, None, t, t, None, **grid)


# -------------------------------------------------------------------------- ZDCF


def _zdcf_oracle_python() -> Path | None:
    for venv in [os.environ.get("ZDCF_VENV"), str(ROOT / ".zdcf-venv")]:
        if venv and (Path(venv) / "bin" / "python").exists():
            return Path(venv) / "bin" / "python"
    return None


def _sparse_dyadic_pair() -> tuple[np.ndarray, ...]:
    """2 × ~150 uneven points, times on a 1/64-day grid.

    pyzdcf stores pair lags as float32; on a 1/64-day grid every lag up to
    2^17 days is exact in float32, so the comparison is not blurred by its
    rounding.  A few time stamps are repeated (both programs average them)
    and a few are shared by the two curves (zero lags, omitted).
    """
    ta, a, ea, tb, b, eb = _lagged_pair(150, 130, 600.0, seed=5, noise=0.05)
    ta, tb = np.round(ta * 64) / 64, np.round(tb * 64) / 64
    ta[10] = ta[11]  # repeated time stamps in curve a
    tb[[20, 40, 60]] = ta[[25, 50, 75]]  # shared with curve a: zero lags
    oa, ob = np.argsort(ta, kind="stable"), np.argsort(tb, kind="stable")
    return ta[oa], a[oa], ea[oa], tb[ob], b[ob], eb[ob]


@pytest.mark.zdcf
def test_zdcf_matches_pyzdcf(tmp_path: Path) -> None:
    # REFERENCES §5 oracle: pyzdcf 1.0.3 (its own venv, run by subprocess),
    # num_MC = 0, its edge bins with fewer than 11 pairs dropped.
    python = _zdcf_oracle_python()
    if python is None:
        pytest.skip(
            "pyzdcf oracle venv missing: run `bash tests/oracles/make_zdcf_env.sh` "
            "(or set ZDCF_VENV)"
        )
    ta, a, ea, tb, b, eb = _sparse_dyadic_pair()
    np.savetxt(tmp_path / "lc1.csv", np.column_stack([ta, a, ea]), delimiter=",", fmt="%.17g")
    np.savetxt(tmp_path / "lc2.csv", np.column_stack([tb, b, eb]), delimiter=",", fmt="%.17g")
    out = subprocess.run(
        [str(python), str(ROOT / "tests" / "oracles" / "run_pyzdcf.py"), str(tmp_path)],
        capture_output=True,
        text=True,
        check=True,
        timeout=300,
    ).stdout
    ref = np.genfromtxt(io.StringIO(out), delimiter=",", skip_header=1)
    ref = ref[ref[:, 6] >= 11]
    lf = zdcf(ta, a, ea, tb, b, eb)
    assert len(lf) == ref.shape[0] > 20
    assert_array_equal(lf.n_pairs, ref[:, 6])
    assert_allclose(lf.lag, ref[:, 0], rtol=1e-9, atol=1e-9)
    assert_allclose(lf.lag - lf.lag_lo, ref[:, 1], rtol=1e-9, atol=1e-9)
    assert_allclose(lf.lag_hi - lf.lag, ref[:, 2], rtol=1e-9, atol=1e-9)
    assert_allclose(lf.coefficient, ref[:, 3], rtol=1e-9, atol=1e-12)
    assert_allclose(lf.error_lo, ref[:, 4], rtol=1e-9, atol=1e-12)
    assert_allclose(lf.error_hi, ref[:, 5], rtol=1e-9, atol=1e-12)


def test_zdcf_bins_have_independent_pairs_and_pearson_coefficients() -> None:
    # Alexander 1997: each bin holds >= min_pairs pairs, no point used twice in
    # a bin; its coefficient is the Pearson r of those pairs (scipy.stats.pearsonr).
    ta, a, ea, tb, b, eb = _sparse_dyadic_pair()
    tau, au, _ = lags_module._average_same_times(ta, a, ea)
    tbu, bu, _ = lags_module._average_same_times(tb, b, eb)
    bins = lags_module._zdcf_binning(
        tau, tbu, min_pairs=11, lag_min=None, lag_max=None, omit_zero_lags=True
    )
    lf = zdcf(ta, a, ea, tb, b, eb)
    assert np.all(lf.n_pairs >= 11)
    assert np.all(np.diff(lf.lag) > 0)
    assert np.all(lf.lag_lo <= lf.lag) and np.all(lf.lag <= lf.lag_hi)
    for k in range(len(lf)):
        ia = bins.pair_a[bins.pair_bin == k]
        jb = bins.pair_b[bins.pair_bin == k]
        assert np.unique(ia).size == ia.size
        assert np.unique(jb).size == jb.size
        assert np.all(tbu[jb] - tau[ia] != 0)
        assert lf.coefficient[k] == pytest.approx(stats.pearsonr(au[ia], bu[jb]).statistic)
    assert np.all(lf.error_lo > 0) and np.all(lf.error_hi > 0)
    assert_allclose(lf.error, 0.5 * (lf.error_lo + lf.error_hi))


def test_zdcf_greedy_rounds_match_a_sequential_scan() -> None:
    # The vectorised selection must equal the plain sequential rule of
    # Alexander 1997 ("a pair whose points already appear in the bin is
    # discarded"), written here as a loop.
    rng = np.random.default_rng(6)
    pa = rng.integers(0, 30, 400)
    pb = rng.integers(0, 25, 400)
    used_a, used_b, expected = set(), set(), []
    for i, j in zip(pa, pb, strict=True):
        ok = i not in used_a and j not in used_b
        expected.append(ok)
        if ok:
            used_a.add(i)
            used_b.add(j)
    unset = lags_module._UNSET
    scratch = tuple(np.full(m, unset) for m in (30, 25, 30, 25))
    got = lags_module._greedy_first_use(pa, pb, scratch)
    assert_array_equal(got, expected)
    assert all(np.all(s == unset) for s in scratch)


def test_zdcf_recovers_an_injected_lag(lagged: tuple) -> None:
    lf = zdcf(*lagged, lag_min=-100.0, lag_max=100.0)
    peak, centroid = peak_and_centroid(lf)
    assert abs(peak - LAG) < 3.0
    assert abs(centroid - LAG) < 3.0
    assert "ZDCF" in lf.method


def test_zdcf_averages_repeated_time_stamps() -> None:
    # Alexander's program (and pyzdcf) average points at identical times.
    ta, a, ea, tb, b, eb = _lagged_pair(60, 60, 200.0, seed=7)
    doubled = zdcf(
        np.concatenate([ta, ta]),
        np.concatenate([a - 0.1, a + 0.1]),
        np.concatenate([ea, ea]),
        tb,
        b,
        eb,
    )
    single = zdcf(ta, a, ea, tb, b, eb)
    assert_allclose(doubled.coefficient, single.coefficient, rtol=1e-12)
    assert_allclose(doubled.lag, single.lag, rtol=1e-12)


def test_zdcf_needs_enough_pairs() -> None:
    t = np.arange(4.0)
    with pytest.raises(ValueError, match="no lag bin reached"):
        zdcf(t, t, None, t + 0.5, t**2, None, min_pairs=11)


# -------------------------------------------------------------------------- ICCF


def test_iccf_at_zero_lag_equals_pearson_r_for_identical_sampling() -> None:
    # Gaskell & Peterson 1987: at tau = 0 with identical sampling both
    # interpolations return the observed points: r1 = r2 = Pearson r (scipy).
    rng = np.random.default_rng(8)
    t = np.sort(rng.uniform(0, 100, 80))
    a = rng.standard_normal(80)
    b = a + rng.standard_normal(80)
    lf = iccf(t, a, t, b, lag_min=-2.0, lag_max=2.0, lag_step=1.0)
    assert lf.lag[2] == 0.0
    assert lf.coefficient[2] == pytest.approx(stats.pearsonr(a, b).statistic, rel=1e-12)
    assert lf.n_pairs[2] == 160
    assert np.all(np.isnan(lf.error))


def test_iccf_halves_match_numpy_interp_and_scipy_pearson() -> None:
    # Each half recomputed with numpy.interp, the overlap rule and scipy.stats.pearsonr.
    ta, a, _, tb, b, _ = _lagged_pair(50, 40, 120.0, seed=9)
    lf = iccf(ta, a, tb, b, lag_min=-10.0, lag_max=10.0, lag_step=5.0)
    for k, tau in enumerate(lf.lag):
        in1 = (ta + tau >= tb[0]) & (ta + tau <= tb[-1])
        r1 = stats.pearsonr(a[in1], np.interp(ta[in1] + tau, tb, b)).statistic
        in2 = (tb - tau >= ta[0]) & (tb - tau <= ta[-1])
        r2 = stats.pearsonr(b[in2], np.interp(tb[in2] - tau, ta, a)).statistic
        assert lf.coefficient[k] == pytest.approx(0.5 * (r1 + r2), rel=1e-10)
        assert lf.n_pairs[k] == in1.sum() + in2.sum()


def test_iccf_recovers_an_injected_lag(lagged: tuple) -> None:
    ta, a, _, tb, b, _ = lagged
    lf = iccf(ta, a, tb, b, lag_min=-50.0, lag_max=50.0, lag_step=0.5)
    peak, centroid = peak_and_centroid(lf)
    assert abs(peak - LAG) <= 1.0
    assert abs(centroid - LAG) <= 1.5
    flipped = iccf(tb, b, ta, a, lag_min=-50.0, lag_max=50.0, lag_step=0.5)
    assert peak_and_centroid(flipped)[0] == pytest.approx(-peak)


# --------------------------------------------------------------- peak, centroid


def _lag_function(lag: list, coef: list) -> LagFunction:
    n = len(lag)
    z = np.zeros(n)
    return LagFunction(np.array(lag, float), np.array(coef), z, np.ones(n, int), z, z, z, z, "test")


def test_peak_and_centroid_over_the_contiguous_region() -> None:
    # Peterson et al. 1998: centroid over r >= 0.8 r_max around the peak;
    # the 0.95 at lag 6 is above the threshold but not connected to the peak.
    lf = _lag_function([0, 1, 2, 3, 4, 5, 6], [0.1, 0.5, 0.85, 1.0, 0.9, 0.5, 0.95])
    peak, centroid = peak_and_centroid(lf)
    assert peak == 3.0
    assert centroid == pytest.approx((2 * 0.85 + 3 * 1.0 + 4 * 0.9) / (0.85 + 1.0 + 0.9))
    lf_nan = _lag_function([0, 1, 2, 3], [0.9, np.nan, 1.0, 0.95])
    assert peak_and_centroid(lf_nan)[1] == pytest.approx((2 * 1.0 + 3 * 0.95) / 1.95)


def test_peak_and_centroid_needs_a_positive_peak() -> None:
    with pytest.raises(ValueError, match="no positive peak"):
        peak_and_centroid(_lag_function([0, 1], [-0.2, -0.1]))
    with pytest.raises(ValueError, match="no finite"):
        peak_and_centroid(_lag_function([0, 1], [np.nan, np.nan]))


def test_lag_function_checks_lengths() -> None:
    with pytest.raises(ValueError, match="coefficient"):
        LagFunction(np.zeros(3), np.zeros(2), *[np.zeros(3)] * 2, *[np.zeros(3)] * 4, "x")


# ------------------------------------------------------ uncertainty, significance


@pytest.mark.parametrize(
    ("method", "params"),
    [
        ("iccf", dict(lag_min=-40.0, lag_max=40.0, lag_step=1.0)),
        ("dcf", dict(lag_min=-40.0, lag_max=40.0, lag_step=2.0, local=True)),
    ],
)
def test_fr_rss_intervals_contain_the_injected_lag(
    lagged: tuple, method: str, params: dict
) -> None:
    # Peterson et al. 1998: the 68 % FR/RSS intervals must contain the true lag
    # (to within one lag step, the resolution of the peak).
    step = params["lag_step"]
    r = lag_uncertainty(*lagged, method=method, n_sim=25, rng=np.random.default_rng(10), **params)
    assert r["n_sim"] == 25
    assert r["n_failed"] == 0
    assert r["peak_lags"].size == r["centroid_lags"].size == 25
    assert r["peak_p16"] - step <= LAG <= r["peak_p84"] + step
    assert r["centroid_p16"] - step <= LAG <= r["centroid_p84"] + step
    assert r["peak_p16"] <= r["peak_median"] <= r["peak_p84"]


@pytest.mark.parametrize(
    ("method", "params"),
    [
        ("zdcf", dict(lag_min=-60.0, lag_max=60.0)),
        ("dcf", dict(lag_min=-40.0, lag_max=40.0, lag_step=2.0)),
        ("iccf", dict(lag_min=-40.0, lag_max=40.0, lag_step=2.0)),
    ],
)
def test_significance_levels_are_ordered(lagged: tuple, method: str, params: dict) -> None:
    # 99 % levels of |coefficient| of uncorrelated red-noise simulations are at
    # least the 95 % levels; the strongly correlated observed peak beats both.
    r = lag_significance(
        *lagged, method=method, n_sim=40, rng=np.random.default_rng(11), psd_slope=1.0, **params
    )
    assert r["psd_slope"] == 1.0
    assert r["psd_slope_source"] == "given"
    assert r["n_failed"] == 0
    ok = np.isfinite(r["level_95"])
    assert ok.sum() > 10
    assert np.all(r["level_99"][ok] >= r["level_95"][ok])
    i = int(np.nanargmax(r["coefficient"]))
    assert abs(r["lag"][i] - LAG) < 3.0
    assert r["coefficient"][i] > r["level_99"][i]


def test_significance_estimates_the_slope_or_falls_back() -> None:
    ta, a, ea, tb, b, eb = _lagged_pair(200, 200, 400.0, seed=12)
    params = dict(lag_min=-20.0, lag_max=20.0, lag_step=2.0)
    rng = np.random.default_rng(13)
    r = lag_significance(ta, a, ea, tb, b, eb, method="iccf", n_sim=5, rng=rng, **params)
    assert r["psd_slope_source"] == "estimated"
    assert 0.0 <= r["psd_slope"] <= 4.0
    short = lag_significance(
        ta[:7], a[:7], None, tb, b, None, method="iccf", n_sim=3, rng=rng, **params
    )
    assert short["psd_slope_source"] == "default"
    assert short["psd_slope"] == 2.0


def test_unknown_method_is_refused(lagged: tuple) -> None:
    with pytest.raises(ValueError, match="unknown lag method"):
        lag_uncertainty(*lagged, method="fft", n_sim=1, rng=np.random.default_rng(0))
