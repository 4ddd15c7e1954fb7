"""Tests of lcstore.science.binning against published examples and reference libraries.

References (see REFERENCES.md):
- §4, Bevington & Robinson, inverse-variance weighted mean (equation numbers from memory);
- §4, astropy.timeseries.aggregate_downsample summing w = 1/σ² and wf = f/σ² (the oracle);
- §4, astropy.stats.bayesian_blocks (Scargle et al. 2013), fitness "measures";
- §1, 15.0 and 16.0 mag averaged in flux = 15.3887 mag (astropy u.ABmag for the conversion);
- numpy / scipy.stats.sem for plain means and standard errors.
"""

import math

import astropy.units as u
import numpy as np
import pandas as pd
import pytest
import scipy.stats
from astropy.stats import bayesian_blocks
from astropy.time import Time
from astropy.timeseries import TimeSeries, aggregate_downsample
from astropy.utils import iers
from numpy.testing import assert_allclose, assert_array_equal

from lcstore.science.binning import (
    BinnedCurve,
    BinningError,
    aggregate,
    bin_blocks,
    bin_fixed,
    parse_bin_width,
    weighted_mean,
)

# Never reach for the network (REFERENCES §3 offline trap).
iers.conf.auto_download = False
iers.conf.auto_max_age = None

# REFERENCES §4 worked example.
REF_T = 60000.0 + np.array([0.1, 0.2, 0.3, 1.1, 1.6, 2.5])
REF_F = np.array([1.0, 1.2, 0.8, 2.0, 2.2, 3.0])
REF_S = np.array([0.1, 0.2, 0.1, 0.1, 0.1, 0.3])


def astropy_weighted_bins(time, flux, sigma, *, width_days, origin=0.0):
    """Oracle (REFERENCES §4): aggregate_downsample summing w and wf, then wf/w and w^-1/2.

    Bins start at origin + k·width (TDB MJD), as lcstore's fixed bins do. Returns
    the start of each non-empty bin, the weighted mean and its error.
    """
    k0 = math.floor((time.min() - origin) / width_days)
    k1 = math.floor((time.max() - origin) / width_days)
    series = TimeSeries(
        time=Time(time, format="mjd", scale="tdb"),
        data={"w": 1.0 / sigma**2, "wf": flux / sigma**2},
    )
    binned = aggregate_downsample(
        series,
        time_bin_start=Time(origin + k0 * width_days, format="mjd", scale="tdb"),
        time_bin_size=width_days * u.day,
        n_bins=k1 - k0 + 1,
        aggregate_func=np.sum,
    )
    w = np.ma.filled(np.ma.asarray(binned["w"]), np.nan)
    wf = np.ma.filled(np.ma.asarray(binned["wf"]), np.nan)
    full = np.isfinite(w) & (w > 0)
    return binned.time_bin_start.tdb.mjd[full], wf[full] / w[full], w[full] ** -0.5


# --- weighted mean ------------------------------------------------------------------


def test_bevington_two_point_example():
    # REFERENCES §4, Bevington & Robinson: 10 ± 1 and 12 ± 2 -> 10.4 ± 0.894427.
    value, error, limit, n = weighted_mean([10.0, 12.0], [1.0, 2.0], None)
    assert_allclose([value, error], [10.4, 0.894427], rtol=1e-6)
    assert (limit, n) == (False, 2)


def test_bevington_example_through_fixed_bins_matches_astropy():
    # REFERENCES §4: same two points in one day, against the aggregate_downsample oracle.
    t = np.array([60010.2, 60010.7])
    f, s = np.array([10.0, 12.0]), np.array([1.0, 2.0])
    curve = bin_fixed(t, f, s, None, width=1.0)
    _, mean, err = astropy_weighted_bins(t, f, s, width_days=1.0)
    assert_allclose(curve.value, mean, rtol=1e-12)
    assert_allclose(curve.error, err, rtol=1e-12)
    assert_allclose([curve.value[0], curve.error[0]], [10.4, 0.894427], rtol=1e-6)


def test_references_example_matches_published_values_and_astropy():
    # REFERENCES §4 (R): [0.93333, 2.1, 3.0] ± [0.066667, 0.070711, 0.3], 1-day bins.
    curve = bin_fixed(REF_T, REF_F, REF_S, None, width=parse_bin_width("1d"))
    assert_allclose(curve.value, [0.93333, 2.1, 3.0], rtol=1e-5)
    assert_allclose(curve.error, [0.066667, 0.070711, 0.3], rtol=1e-5)
    start, mean, err = astropy_weighted_bins(REF_T, REF_F, REF_S, width_days=1.0)
    assert_allclose(curve.time_lo, start, rtol=0, atol=1e-9)
    assert_allclose(curve.value, mean, rtol=1e-12)
    assert_allclose(curve.error, err, rtol=1e-12)
    assert_array_equal(curve.time_lo, [60000.0, 60001.0, 60002.0])
    assert_array_equal(curve.time_hi, [60001.0, 60002.0, 60003.0])
    assert_array_equal(curve.time, [60000.5, 60001.5, 60002.5])
    assert_array_equal(curve.n, [3, 2, 1])
    assert not curve.upper_limit.any()
    assert len(curve) == 3


@pytest.mark.parametrize(
    ("width_text", "origin", "n_points", "span_days"),
    [("1d", 0.0, 1500, 300.0), ("6h", 0.0, 800, 80.0), ("0.7d", 0.35, 800, 200.0)],
)
def test_random_dataset_many_bins_matches_astropy(width_text, origin, n_points, span_days):
    # REFERENCES §4 oracle, astropy aggregate_downsample, on a seeded random curve with
    # gaps (so that many bins are empty and must be dropped) and unsorted input.
    rng = np.random.default_rng(20240611)
    t = 60000.0 + rng.uniform(0.0, span_days, n_points)
    t = t[(t - 60000.0) % 20.0 < 14.0]  # six-day gaps every twenty days
    f = rng.lognormal(1.0, 0.5, t.size)
    s = rng.uniform(0.05, 0.5, t.size)
    width = parse_bin_width(width_text)
    curve = bin_fixed(t, f, s, None, width=width, origin=origin)
    start, mean, err = astropy_weighted_bins(t, f, s, width_days=width, origin=origin)
    assert len(curve) == start.size > 50
    assert_allclose(curve.time_lo, start, rtol=0, atol=1e-8)
    assert_allclose(curve.time_hi - curve.time_lo, width, rtol=1e-9)
    assert_allclose(curve.value, mean, rtol=1e-10)
    assert_allclose(curve.error, err, rtol=1e-10)
    assert curve.n.sum() == t.size


def test_tiny_and_huge_errors_do_not_overflow():
    # Bevington & Robinson weights 1/σ² overflow float64 for σ = 1e-200 if summed naively;
    # reference: numpy.average with the relative weights 1/σ² ∝ [4, 1].
    value, error, _, _ = weighted_mean([1.0, 3.0], [1e-200, 2e-200], None)
    assert_allclose(value, np.average([1.0, 3.0], weights=[4.0, 1.0]), rtol=1e-12)
    assert_allclose(error, 1e-200 / math.sqrt(1.25), rtol=1e-12)


def test_large_input_matches_pandas_groupby():
    # More points than one internal piece (131072), with limits, missing errors and
    # limits-only bins; reference: pandas groupby sums, means and sem (ddof=1), and min.
    rng = np.random.default_rng(5)
    n = 300_000
    t = rng.uniform(0.0, 4000.0, n)
    f = rng.lognormal(0.0, 0.3, n)
    s = rng.uniform(0.01, 0.1, n)
    day = np.floor(t).astype(int)
    s[(day % 7 == 0) & (rng.random(n) < 0.05)] = np.nan  # some bins lack an error
    ul = (day % 11 == 0) | (rng.random(n) < 0.02)  # whole limit-only bins, stray limits
    curve = bin_fixed(t, f, s, ul, width=1.0)

    frame = pd.DataFrame({"day": day, "f": f, "s": s, "ul": ul})
    det = frame[~frame.ul].assign(w=lambda d: d.s**-2, wf=lambda d: d.f * d.s**-2)
    by_day = det.groupby("day")
    has_all_errors = by_day.s.count() == by_day.f.count()
    weighted = by_day.wf.sum() / by_day.w.sum()
    expected_value = weighted.where(has_all_errors, by_day.f.mean())
    expected_error = (by_day.w.sum() ** -0.5).where(has_all_errors, by_day.f.sem())
    limits = frame[frame.ul & ~frame.day.isin(det.day)].groupby("day").f.min()
    expected = pd.concat([expected_value, limits]).sort_index()

    assert_array_equal(curve.time_lo, expected.index.to_numpy(dtype=float))
    assert_allclose(curve.value, expected.to_numpy(), rtol=1e-10)
    is_limit = np.isin(curve.time_lo, limits.index.to_numpy())
    assert_array_equal(curve.upper_limit, is_limit)
    assert_allclose(curve.error[~is_limit], expected_error.sort_index().to_numpy(), rtol=1e-10)
    assert np.isnan(curve.error[is_limit]).all()
    assert (~has_all_errors).sum() > 10 and is_limit.sum() > 10


# --- magnitudes are averaged in flux ------------------------------------------------------


def test_magnitudes_are_averaged_in_flux_space():
    # REFERENCES §1: 15.0 and 16.0 mag averaged in flux = 15.3887 mag (not 15.5);
    # conversion with astropy u.ABmag (any zero point gives the same magnitude).
    mags = np.array([15.0, 16.0]) * u.ABmag
    flux = mags.to_value(u.mJy)
    curve = bin_fixed(np.array([60100.2, 60100.6]), flux, None, None, width=1.0)
    mean_mag = (curve.value * u.mJy).to_value(u.ABmag)
    assert_allclose(mean_mag, [15.3887], atol=5e-5)
    # Plain mean and standard error of the two fluxes (numpy, scipy.stats.sem).
    assert_allclose(curve.value, [np.mean(flux)], rtol=1e-12)
    assert_allclose(curve.error, [scipy.stats.sem(flux)], rtol=1e-12)


# --- points without errors, mixed bins ---------------------------------------------------


def test_points_without_errors_plain_mean_and_standard_error():
    # numpy mean and scipy.stats.sem (ddof=1) per bin; a single point has no error.
    rng = np.random.default_rng(3)
    t = np.concatenate([10.0 + rng.uniform(0, 1, 7), 11.0 + rng.uniform(0, 1, 4), [12.5]])
    f = rng.normal(5.0, 1.0, t.size)
    curve = bin_fixed(t, f, np.full(t.size, np.nan), None, width=1.0)
    groups = [f[:7], f[7:11], f[11:]]
    assert_allclose(curve.value, [g.mean() for g in groups], rtol=1e-12)
    assert_allclose(curve.error[:2], [scipy.stats.sem(g) for g in groups[:2]], rtol=1e-12)
    assert np.isnan(curve.error[2])
    assert_array_equal(curve.n, [7, 4, 1])


@pytest.mark.parametrize("missing", [np.nan, 0.0, -1.0, np.inf])
def test_mixed_bin_falls_back_to_plain_mean(missing):
    # Documented choice: a bin where some detections lack a usable error is the plain
    # mean and scipy.stats.sem of its detections; the other bin stays weighted (numpy).
    t = np.array([5.1, 5.2, 5.3, 6.1, 6.2])
    f = np.array([1.0, 2.0, 4.0, 3.0, 5.0])
    s = np.array([0.1, missing, 0.3, 0.5, 1.0])
    curve = bin_fixed(t, f, s, None, width=1.0)
    assert_allclose(curve.value[0], np.mean(f[:3]), rtol=1e-12)
    assert_allclose(curve.error[0], scipy.stats.sem(f[:3]), rtol=1e-12)
    w = 1.0 / s[3:] ** 2
    assert_allclose(curve.value[1], np.average(f[3:], weights=w), rtol=1e-12)
    assert_allclose(curve.error[1], w.sum() ** -0.5, rtol=1e-12)


def test_error_none_means_no_errors():
    # scipy.stats.sem reference.
    f = np.array([1.0, 2.0, 6.0])
    value, error, limit, n = weighted_mean(f, None, None)
    assert_allclose([value, error], [f.mean(), scipy.stats.sem(f)], rtol=1e-12)
    assert (limit, n) == (False, 3)


# --- upper limits ---------------------------------------------------------------------


def test_limits_are_left_out_of_bins_with_detections():
    # Rule from DESIGN §4; reference: numpy.average of the detections only.
    t = np.array([1.1, 1.2, 1.3, 1.4])
    f = np.array([2.0, 4.0, 0.5, 100.0])
    s = np.array([0.2, 0.4, np.nan, np.nan])
    ul = np.array([False, False, True, True])
    curve = bin_fixed(t, f, s, ul, width=1.0)
    w = 1.0 / s[:2] ** 2
    assert_allclose(curve.value, [np.average(f[:2], weights=w)], rtol=1e-12)
    assert_allclose(curve.error, [w.sum() ** -0.5], rtol=1e-12)
    assert_array_equal(curve.upper_limit, [False])
    assert_array_equal(curve.n, [2])


def test_limits_only_bin_returns_smallest_limit():
    # Rule from DESIGN §4; reference: numpy.min of the limits.
    t = np.array([1.5, 2.1, 2.4, 2.9])
    f = np.array([3.0, 7.0, 5.0, 6.0])
    s = np.array([0.3, 1.0, np.nan, 0.5])
    ul = np.array([False, True, True, True])
    curve = bin_fixed(t, f, s, ul, width=1.0)
    assert_array_equal(curve.upper_limit, [False, True])
    assert_allclose(curve.value, [3.0, np.min(f[1:])])
    assert np.isnan(curve.error[1])
    assert_array_equal(curve.n, [1, 3])


def test_weighted_mean_of_limits_only():
    value, error, limit, n = weighted_mean([4.0, 2.5, 3.0], [np.nan] * 3, [True] * 3)
    assert (value, limit, n) == (2.5, True, 3)
    assert math.isnan(error)


def test_weighted_mean_of_nothing():
    value, error, limit, n = weighted_mean([], [], [])
    assert math.isnan(value) and math.isnan(error)
    assert (limit, n) == (False, 0)


def test_aggregate_empty_group_and_bad_index():
    value, error, limit, n = aggregate(
        np.array([0, 0, 2]), [1.0, 3.0, 2.0], [1.0, 1.0, 1.0], None, 3
    )
    assert_allclose(value[[0, 2]], [2.0, 2.0])  # numpy.mean of equal-weight points
    assert np.isnan(value[1]) and np.isnan(error[1])
    assert_array_equal(n, [2, 0, 1])
    assert_array_equal(limit, [False, False, False])
    with pytest.raises(BinningError, match=r"every index must lie in 0 \.\. n_groups - 1"):
        aggregate(np.array([0, 3]), [1.0, 2.0], None, None, 3)
    with pytest.raises(BinningError, match="one-dimensional array of integers"):
        aggregate(np.array([0.0, 1.0]), [1.0, 2.0], None, None, 3)


# --- fixed-width bin edges ------------------------------------------------------------------


def test_one_day_bins_are_integer_mjds():
    # DESIGN §4: edges aligned to MJD 0, integer days for 1d; reference: numpy.floor.
    t = np.array([59999.999, 60000.0, 60000.5, 60003.25])
    curve = bin_fixed(t, np.ones(4), None, None, width=parse_bin_width("1d"))
    assert_array_equal(curve.time_lo, np.unique(np.floor(t)))
    assert_array_equal(curve.time_hi, np.unique(np.floor(t)) + 1)
    assert_array_equal(curve.n, [1, 2, 1])


@pytest.mark.parametrize(
    ("times", "width", "origin", "expected_lo"),
    [
        ([-2.3, -0.2, 0.1], 1.0, 0.0, [-3.0, -1.0, 0.0]),  # negative k
        ([3.2, 3.9, 5.0], 1.0, 10.0, [3.0, 5.0]),  # origin after the data: k < 0
        ([0.1, 0.3, 0.6], 0.5, 0.25, [-0.25, 0.25]),  # shifted origin
        ([60000.1, 60000.3], 0.25, 0.0, [60000.0, 60000.25]),  # 6 h bins
    ],
)
def test_origin_alignment(times, width, origin, expected_lo):
    # Edges at origin + k·width, k = floor((t - origin)/width) (numpy.floor reference).
    t = np.array(times)
    curve = bin_fixed(t, np.ones(t.size), None, None, width=width, origin=origin)
    expected = origin + np.unique(np.floor((t - origin) / width)) * width
    assert_allclose(curve.time_lo, expected, rtol=0, atol=1e-12)
    assert_allclose(curve.time_lo, expected_lo, rtol=0, atol=1e-12)
    assert_allclose(curve.time_hi, curve.time_lo + width, rtol=0, atol=1e-12)
    assert_allclose(curve.time, curve.time_lo + width / 2, rtol=0, atol=1e-12)


def test_points_on_edges_fall_in_the_bin_they_open():
    # Bins are half-open [lo, hi): a time equal to an edge opens the next bin, even where
    # floor((t - origin)/width) rounds the other way (e.g. 0.3/0.1 = 2.9999999999999996).
    width, origin = 0.1, 0.7
    t = origin + np.arange(-500, 500) * width
    curve = bin_fixed(t, np.arange(t.size, dtype=float), None, None, width=width, origin=origin)
    assert len(curve) == t.size
    assert_array_equal(curve.n, 1)
    assert_array_equal(curve.value, np.arange(t.size))
    assert np.all((curve.time_lo <= t) & (t < curve.time_hi))


def test_sparse_span_is_not_allocated():
    # Two points 1e9 days apart in 1e-3 d bins: 1e12 bins in the span; only the two
    # occupied ones may exist (a span-sized array would need 8 TB).
    t = np.array([0.0, 1.0e9])
    curve = bin_fixed(t, np.array([1.0, 2.0]), None, None, width=1e-3)
    assert_allclose(curve.time_lo, [0.0, 1.0e9], atol=1e-3)
    assert_array_equal(curve.value, [1.0, 2.0])


def test_max_bins_counts_the_span():
    # 0.5 .. 9.5 in 1-day bins covers the 10 bins k = 0..9 (only two occupied).
    t = np.array([0.5, 9.5])
    assert len(bin_fixed(t, np.ones(2), None, None, width=1.0, max_bins=10)) == 2
    with pytest.raises(BinningError, match=r"would make 10 bins, more than the limit of 9"):
        bin_fixed(t, np.ones(2), None, None, width=1.0, max_bins=9)
    with pytest.raises(BinningError, match="more than the limit of 1000"):
        bin_fixed(np.array([0.0, 1.0e4]), np.ones(2), None, None, width=1e-9, max_bins=1000)


def test_width_too_small_for_float_bins():
    with pytest.raises(BinningError, match="too small"):
        bin_fixed(np.array([0.0, 1.0e4]), np.ones(2), None, None, width=1e-300)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"width": 0.0}, "bin width must be a finite positive number"),
        ({"width": -1.0}, "bin width must be a finite positive number"),
        ({"width": float("nan")}, "bin width must be a finite positive number"),
        ({"width": 1.0, "origin": float("inf")}, "bin origin must be a finite time"),
    ],
)
def test_bad_width_or_origin(kwargs, message):
    with pytest.raises(BinningError, match=message):
        bin_fixed(np.array([1.0]), np.array([1.0]), None, None, **kwargs)


@pytest.mark.parametrize(
    ("time", "value", "error", "message"),
    [
        ([1.0, np.nan], [1.0, 2.0], None, "every time must be a finite number"),
        ([1.0, 2.0], [1.0, np.inf], None, "every value"),
        ([1.0, 2.0], [1.0], None, "same length"),
        ([1.0, 2.0], [1.0, 2.0], [1.0], "same length as time"),
    ],
)
def test_bad_points(time, value, error, message):
    with pytest.raises(BinningError, match=message):
        bin_fixed(np.array(time), np.array(value), error, None, width=1.0)


def test_empty_input_gives_empty_curve():
    for curve in (
        bin_fixed([], [], [], [], width=1.0),
        bin_blocks([], [], [], []),
    ):
        assert isinstance(curve, BinnedCurve)
        assert len(curve) == 0
        assert curve.n.dtype == np.int64 and curve.upper_limit.dtype == bool


# --- bin widths ---------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "days"),
    [
        ("1d", 1.0),
        ("6h", 0.25),
        ("30min", 1.0 / 48.0),
        ("3600s", 1.0 / 24.0),
        ("2.5", 2.5),
        ("0.5d", 0.5),
        (" 1 d ", 1.0),
        ("12H", 0.5),
        (".25d", 0.25),
        ("1e-1d", 0.1),
        ("86400 s", 1.0),
    ],
)
def test_parse_bin_width(text, days):
    assert parse_bin_width(text) == pytest.approx(days, rel=1e-15)


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("", "cannot read bin width ''"),
        ("abc", "cannot read bin width 'abc'"),
        ("1.5.2d", "cannot read bin width"),
        ("d", "cannot read bin width"),
        ("1 week", "unknown unit 'week'"),
        ("3w", r"unknown unit 'w' in bin width '3w': use d, h, min or s"),
        ("1m", "unknown unit 'm'"),
        ("0", "bin width must be a finite positive duration, got '0'"),
        ("-1d", "bin width must be a finite positive duration"),
        ("1e400d", "finite positive duration"),
        ("inf", "cannot read bin width 'inf'"),
    ],
)
def test_parse_bin_width_rejects(text, message):
    with pytest.raises(BinningError, match=message):
        parse_bin_width(text)


# --- Bayesian blocks -----------------------------------------------------------------------


def step_curve():
    """REFERENCES §4 example, construction used here (it reproduces the published edges):
    t = 0, 0.5, ..., 100 (201 points, both ends included); x = 1 for t < 50 and 3 for
    t >= 50; x_obs = np.random.default_rng(0).normal(x, 0.1); σ = 0.1 everywhere."""
    t = np.arange(0.0, 100.5, 0.5)
    x = np.random.default_rng(0).normal(np.where(t < 50.0, 1.0, 3.0), 0.1)
    return t, x, np.full(t.size, 0.1)


def test_blocks_reference_step_example():
    # REFERENCES §4 (R): p0 = 0.01 -> edges [0, 49.75, 100]; recomputed with astropy.
    t, x, s = step_curve()
    curve = bin_blocks(t, x, s, None, p0=0.01)
    expected = bayesian_blocks(t, x, s, fitness="measures", p0=0.01)
    assert_allclose(expected, [0.0, 49.75, 100.0])
    assert_allclose(np.r_[curve.time_lo, curve.time_hi[-1]], expected, rtol=0, atol=1e-12)
    # Each block is the weighted mean of its points (Bevington & Robinson; numpy.average).
    first = t < 49.75
    assert_allclose(curve.value, [x[first].mean(), x[~first].mean()], rtol=1e-12)
    assert_allclose(curve.error, [0.1 / math.sqrt(first.sum()), 0.1 / math.sqrt(101)])
    assert_array_equal(curve.n, [100, 101])


@pytest.mark.parametrize("p0", [0.05, 0.3])
def test_blocks_edges_equal_astropy(p0):
    # astropy.stats.bayesian_blocks on the same (unsorted, heteroscedastic) data.
    rng = np.random.default_rng(11)
    t = rng.uniform(0, 60, 150)
    truth = np.select([t < 15, t < 40], [2.0, 5.0], 3.0)
    s = rng.uniform(0.2, 0.6, t.size)
    x = rng.normal(truth, s)
    curve = bin_blocks(t, x, s, None, p0=p0)
    order = np.argsort(t)
    expected = bayesian_blocks(t[order], x[order], s[order], fitness="measures", p0=p0)
    assert len(curve) == expected.size - 1 >= 3
    assert_allclose(np.r_[curve.time_lo, curve.time_hi[-1]], expected, rtol=0, atol=1e-12)
    for lo, hi, value, n in zip(curve.time_lo, curve.time_hi, curve.value, curve.n, strict=True):
        inside = (t >= lo) & ((t < hi) | (hi == t.max()))
        assert_allclose(value, np.average(x[inside], weights=s[inside] ** -2), rtol=1e-12)
        assert n == inside.sum()


def test_blocks_duplicate_times_are_combined_first():
    # astropy refuses repeated times with the measures fitness; lcstore combines them into
    # their weighted mean first, so the edges equal astropy's on the combined data.
    t, x, s = step_curve()
    t2, x2, s2 = np.r_[t, t[::10]], np.r_[x, x[::10] + 0.05], np.r_[s, s[::10] * 2]
    with pytest.raises(ValueError, match="Repeated values in t not supported"):
        bayesian_blocks(t2, x2, s2, fitness="measures", p0=0.01)
    curve = bin_blocks(t2, x2, s2, None, p0=0.01)
    # Combined data, computed independently with numpy.average per distinct time.
    distinct = np.unique(t2)
    xc = np.array([np.average(x2[t2 == ti], weights=s2[t2 == ti] ** -2) for ti in distinct])
    sc = np.array([(s2[t2 == ti] ** -2).sum() ** -0.5 for ti in distinct])
    expected = bayesian_blocks(distinct, xc, sc, fitness="measures", p0=0.01)
    assert_allclose(np.r_[curve.time_lo, curve.time_hi[-1]], expected, rtol=0, atol=1e-12)
    assert curve.n.sum() == t2.size


def test_blocks_outer_edges_cover_limits():
    t, x, s = step_curve()
    tl = np.r_[-5.0, t, 104.0]
    xl = np.r_[0.5, x, 0.7]
    sl = np.r_[np.nan, s, np.nan]
    ul = np.r_[True, np.zeros(t.size, bool), True]
    curve = bin_blocks(tl, xl, sl, ul, p0=0.01)
    expected = bayesian_blocks(t, x, s, fitness="measures", p0=0.01)
    assert_allclose(curve.time_lo, [-5.0, expected[1]])
    assert_allclose(curve.time_hi, [expected[1], 104.0])
    # The limits are left out of the block means (numpy.mean of the detections).
    assert_allclose(curve.value[0], x[t < 49.75].mean(), rtol=1e-12)
    assert_array_equal(curve.n, [100, 101])
    assert not curve.upper_limit.any()


def test_blocks_fewer_than_two_detections_is_one_block():
    t = np.array([1.0, 2.0, 3.0])
    f = np.array([4.0, 2.0, 3.0])
    s = np.array([np.nan, 0.5, np.nan])
    ul = np.array([True, False, True])
    curve = bin_blocks(t, f, s, ul)
    assert_array_equal([curve.time_lo[0], curve.time_hi[0]], [1.0, 3.0])
    assert_array_equal([curve.value[0], curve.error[0], curve.n[0]], [2.0, 0.5, 1])

    limits = bin_blocks(t, f, None, np.ones(3, bool))
    assert_array_equal(limits.upper_limit, [True])
    assert_array_equal([limits.value[0], limits.n[0]], [2.0, 3])


def test_blocks_need_errors():
    t, x, s = step_curve()
    s = s.copy()
    s[7] = np.nan
    with pytest.raises(BinningError, match="blocks need an error on every detection"):
        bin_blocks(t, x, s, None)
    with pytest.raises(BinningError, match="blocks need an error on every detection"):
        bin_blocks(t, x, None, None)


@pytest.mark.parametrize("p0", [0.0, 1.0, -0.1, float("nan")])
def test_blocks_bad_p0(p0):
    t, x, s = step_curve()
    with pytest.raises(BinningError, match="p0 must lie strictly between 0 and 1"):
        bin_blocks(t, x, s, None, p0=p0)


def test_blocks_max_bins():
    t, x, s = step_curve()
    assert len(bin_blocks(t, x, s, None, p0=0.01, max_bins=2)) == 2
    with pytest.raises(BinningError, match="found 2 blocks, more than the limit of 1"):
        bin_blocks(t, x, s, None, p0=0.01, max_bins=1)
