"""Tests of lcstore.science.simulate (Timmer & König 1995 red noise, PSD slopes)."""

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy import signal, stats

from lcstore.science.simulate import psd_slope, red_noise, red_noise_at


@pytest.mark.parametrize("beta", [1.0, 2.0])
def test_psd_slope_recovered_within_its_error(beta: float) -> None:
    # REFERENCES §5 (Timmer & König 1995): a simulated f^-beta curve must give
    # back beta; seeded, so deterministic.
    rng = np.random.default_rng(20)
    x = red_noise(1024, 1.0, beta, rng=rng)
    estimate, error = psd_slope(np.arange(1024.0), x)
    assert 0.02 < error < 0.2
    assert abs(estimate - beta) < 3 * error


@pytest.mark.parametrize("beta", [1.0, 2.0])
def test_psd_slope_agrees_with_scipy_periodogram_fit(beta: float) -> None:
    # scipy.signal.periodogram (Hann window against leakage) + scipy.stats.linregress on the
    # same curve is an independent estimate of the same slope.
    rng = np.random.default_rng(21)
    x = red_noise(1024, 0.5, beta, rng=rng)
    estimate, error = psd_slope(0.5 * np.arange(1024), x)
    f, p = signal.periodogram(x, fs=2.0, window="hann")
    keep = (f > 0) & (f < f[-1])
    fit = stats.linregress(np.log10(f[keep]), np.log10(p[keep]))
    assert abs(estimate - (-fit.slope)) < 3 * error


@pytest.mark.parametrize("beta", [0.0, 1.0, 2.0])
def test_mean_periodogram_follows_the_power_law(beta: float) -> None:
    # Timmer & König (1995, section 4): the expectation of the periodogram is
    # P(f) ∝ f^-beta.  Without the red-noise leak (oversample=1) the mean of
    # many periodograms (scipy.signal.periodogram, no detrending) is a power
    # law of slope -beta to a few per cent.
    rng = np.random.default_rng(22)
    sims = np.array([red_noise(256, 1.0, beta, rng=rng, oversample=1) for _ in range(300)])
    f, p = signal.periodogram(sims, detrend=False, axis=1)
    mean_p = p.mean(axis=0)[1:-1]
    fit = stats.linregress(np.log10(f[1:-1]), np.log10(mean_p))
    assert fit.slope == pytest.approx(-beta, abs=0.05)


def test_red_noise_is_rescaled_and_reproducible() -> None:
    # Definition of the rescaling (sample mean and ddof=0 standard deviation).
    x = red_noise(300, 0.1, 1.5, rng=np.random.default_rng(3), mean=5.0, std=2.0)
    y = red_noise(300, 0.1, 1.5, rng=np.random.default_rng(3), mean=5.0, std=2.0)
    assert x.shape == (300,)
    assert_allclose([x.mean(), x.std()], [5.0, 2.0], rtol=1e-12)
    assert_array_equal(x, y)


def test_red_noise_at_on_a_regular_grid_equals_red_noise() -> None:
    # On times that are the simulation grid itself, interpolation is exact.
    t = 100.0 + 0.25 * np.arange(400)
    x = red_noise_at(t, 2.0, rng=np.random.default_rng(4), mean=1.0, std=0.3, dt=0.25)
    y = red_noise(400, 0.25, 2.0, rng=np.random.default_rng(4), mean=1.0, std=0.3)
    assert_allclose(x, y, rtol=1e-12, atol=1e-12)


def test_red_noise_at_uneven_times_keeps_order_and_scale() -> None:
    rng = np.random.default_rng(5)
    t = rng.uniform(0.0, 300.0, 250)  # unsorted on purpose
    x = red_noise_at(t, 1.0, rng=rng, mean=-2.0, std=0.5)
    assert x.shape == t.shape
    assert_allclose([x.mean(), x.std()], [-2.0, 0.5], rtol=1e-12)
    # neighbours in time are more alike than random pairs (red spectrum)
    order = np.argsort(t)
    step = np.diff(x[order])
    assert np.mean(step**2) < 2 * np.var(x)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        (dict(n=1, dt=1.0, beta=1.0), "n >= 2"),
        (dict(n=10, dt=0.0, beta=1.0), "positive time step"),
        (dict(n=10, dt=1.0, beta=1.0, oversample=0), "oversample"),
    ],
)
def test_red_noise_rejects_bad_arguments(kwargs: dict, match: str) -> None:
    with pytest.raises(ValueError, match=match):
        red_noise(rng=np.random.default_rng(0), **kwargs)


def test_psd_slope_needs_enough_points() -> None:
    with pytest.raises(ValueError, match="at least 8"):
        psd_slope(np.arange(5.0), np.arange(5.0))
