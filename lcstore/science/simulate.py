"""Red-noise light-curve simulation and power-spectrum slope estimation.

Simulated curves follow Timmer & König (1995, A&A 300, 707): at every Fourier
frequency the real and imaginary parts of the transform are independent
Gaussian deviates of variance P(f)/2, and the inverse FFT gives one
realisation of a stochastic process with power spectral density
P(f) ∝ f^-β.  They are used as the null hypothesis (uncorrelated red noise)
when the significance of a cross-correlation peak is judged
(:func:`lcstore.science.lags.lag_significance`).

All functions are unit-agnostic: times and time steps share one unit (days
in lcstore), values and their mean/standard deviation share another (the
flux unit of the curve).
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt
from scipy import stats

__all__ = ["red_noise", "red_noise_at", "psd_slope"]

#: Largest fine grid :func:`red_noise_at` builds before it coarsens the step
#: (each simulation then transforms ``8 * MAX_GRID_POINTS`` values).
MAX_GRID_POINTS = 2**17
#: Largest regular grid :func:`psd_slope` interpolates uneven data onto.
MAX_PSD_GRID_POINTS = 2**21


def _rescale(x: np.ndarray, mean: float, std: float) -> np.ndarray:
    sd = x.std()
    if sd == 0.0:
        return np.full_like(x, mean)
    return (x - x.mean()) / sd * std + mean


def red_noise(
    n: int,
    dt: float,
    beta: float,
    *,
    rng: np.random.Generator,
    mean: float = 0.0,
    std: float = 1.0,
    oversample: int = 8,
) -> np.ndarray:
    """Evenly sampled red noise with power spectrum P(f) ∝ f^-β.

    Timmer & König (1995, A&A 300, 707): for each Fourier
    frequency f_j = j/(N Δt), j = 1 … N/2, draw the real and imaginary parts of
    the transform from N(0, P(f_j)/2) (the Nyquist term of an even N is real),
    set the zero-frequency term to 0 and inverse-FFT.  To include the
    "red-noise leak" of power from time scales longer than the observed span,
    a curve ``oversample`` times longer is generated and a segment of ``n``
    points at a random offset is returned.  The segment is finally shifted and
    scaled to the requested sample mean and standard deviation (ddof = 0), so
    only the shape of the spectrum, not its normalisation, is simulated.

    Parameters
    ----------
    n : int
        Number of points returned (≥ 2).
    dt : float
        Sampling step, in the time unit of the caller (days in lcstore).
    beta : float
        Power-law index β of the power spectral density, P(f) ∝ f^-β
        (0: white noise, 1: flicker noise, 2: random walk).
    rng : numpy.random.Generator
        Source of randomness; pass a seeded generator for reproducibility.
    mean, std : float
        Sample mean and standard deviation of the returned curve, in the
        value unit of the caller.
    oversample : int
        Length factor of the simulated curve from which the segment is cut
        (1 disables the red-noise leak).

    Returns
    -------
    numpy.ndarray
        ``n`` values at times ``0, dt, 2 dt, …``.
    """
    if n < 2:
        raise ValueError(f"red_noise needs n >= 2 points, got {n}")
    if not dt > 0:
        raise ValueError(f"red_noise needs a positive time step dt, got {dt}")
    if oversample < 1:
        raise ValueError(f"oversample must be >= 1, got {oversample}")
    if std < 0:
        raise ValueError(f"std must be >= 0, got {std}")
    n_long = int(n) * int(oversample)
    freq = np.fft.rfftfreq(n_long, d=dt)[1:]
    amplitude = np.sqrt(0.5 * freq ** (-float(beta)))
    spectrum = np.zeros(freq.size + 1, dtype=complex)
    spectrum[1:] = amplitude * (
        rng.standard_normal(freq.size) + 1j * rng.standard_normal(freq.size)
    )
    if n_long % 2 == 0:
        # The Nyquist frequency of an even-length series has a real transform.
        spectrum[-1] = amplitude[-1] * np.sqrt(2.0) * rng.standard_normal()
    series = np.fft.irfft(spectrum, n=n_long)
    start = int(rng.integers(0, n_long - n + 1))
    return _rescale(series[start : start + n], float(mean), float(std))


def red_noise_at(
    times: npt.ArrayLike,
    beta: float,
    *,
    rng: np.random.Generator,
    mean: float = 0.0,
    std: float = 1.0,
    dt: float | None = None,
) -> np.ndarray:
    """Red noise (P(f) ∝ f^-β) sampled at given, possibly uneven, times.

    A Timmer & König (1995) curve (:func:`red_noise`, with red-noise leak) is
    simulated on a regular grid of step ``dt`` covering ``[min(times),
    max(times)]`` and linearly interpolated at ``times``.  The sampled values
    are then shifted and scaled to the requested sample mean and standard
    deviation (ddof = 0).

    Parameters
    ----------
    times : array_like
        Observation times (any order; days in lcstore).
    beta : float
        Power-law index of the power spectral density.
    rng : numpy.random.Generator
        Source of randomness.
    mean, std : float
        Sample mean and standard deviation of the returned values.
    dt : float, optional
        Step of the fine grid.  Default: half the median positive spacing of
        the sorted times.  If the grid would exceed ``MAX_GRID_POINTS`` points
        the step is enlarged to fit (power on shorter time scales is lost,
        which matters little for red spectra).

    Returns
    -------
    numpy.ndarray
        One value per input time, in the input order.
    """
    t = np.asarray(times, dtype=float)
    if t.ndim != 1 or t.size < 2:
        raise ValueError("red_noise_at needs a one-dimensional array of at least 2 times")
    if not np.all(np.isfinite(t)):
        raise ValueError("red_noise_at: times must be finite")
    t0 = float(t.min())
    span = float(t.max()) - t0
    if span <= 0:
        raise ValueError("red_noise_at: the times must span a positive interval")
    if dt is None:
        gaps = np.diff(np.unique(t))
        dt = float(np.median(gaps)) / 2.0
    if not dt > 0:
        raise ValueError(f"red_noise_at needs a positive dt, got {dt}")
    dt = max(float(dt), span / (MAX_GRID_POINTS - 1))
    n_grid = int(np.ceil(span / dt)) + 1
    grid = t0 + dt * np.arange(n_grid)
    series = red_noise(max(n_grid, 2), dt, beta, rng=rng)
    return _rescale(np.interp(t, grid, series), float(mean), float(std))


def psd_slope(
    times: npt.ArrayLike,
    values: npt.ArrayLike,
    *,
    dt: float | None = None,
) -> tuple[float, float]:
    """Power-law index β of the power spectrum, P(f) ∝ f^-β, from a light curve.

    The periodogram |FFT|² is computed at the Fourier frequencies
    j/(N Δt), j = 1 … ⌊(N−1)/2⌋ (zero and Nyquist frequencies left out), and
    β is minus the ordinary least-squares slope of log10 P against log10 f.
    The log-periodogram of a power-law process scatters by a constant
    0.557 dex about the log-spectrum (its χ²₂/2 distribution; Papadakis &
    Lawrence 1993, MNRAS 261, 612; Vaughan 2005, A&A 431, 391), so the
    least-squares standard error of the slope (as ``scipy.stats.linregress``)
    is a fair error estimate.  Before the transform the curve is
    "end-matched" (the straight line through its first and last points is
    subtracted; Fougere 1985, J. Geophys. Res. 90, 4355) to suppress the
    leakage that otherwise flattens steep (β ≳ 2) spectra.  End-matching
    adds a little low-frequency power to nearly white curves: for β ≈ 0 the
    estimate is biased upwards by about 0.15 (512 points); for 1 ≤ β ≤ 3 it is
    unbiased and the standard error is calibrated (checked by simulation).

    Unevenly sampled data are first linearly interpolated onto a regular grid
    of step ``dt``; interpolation removes power at high frequencies and so
    tends to steepen the estimate.  Use it as a rough guide for simulations,
    not as a measurement.

    Parameters
    ----------
    times : array_like
        Observation times (days in lcstore); sorted internally.
    values : array_like
        Values at ``times`` (any flux unit).
    dt : float, optional
        Grid step.  Default: the sampling step when the times are evenly
        spaced (to 1e-6 relative), otherwise the median positive spacing.

    Returns
    -------
    beta, beta_error : float
        The slope estimate and its standard error.
    """
    t = np.asarray(times, dtype=float)
    v = np.asarray(values, dtype=float)
    if t.shape != v.shape or t.ndim != 1:
        raise ValueError("psd_slope: times and values must be one-dimensional and equally long")
    keep = np.isfinite(t) & np.isfinite(v)
    t, v = t[keep], v[keep]
    order = np.argsort(t, kind="stable")
    t, v = t[order], v[order]
    t, first = np.unique(t, return_index=True)
    counts = np.diff(np.append(first, v.size))
    v = np.add.reduceat(v, first) / counts
    if t.size < 8:
        raise ValueError(f"psd_slope needs at least 8 distinct times, got {t.size}")
    gaps = np.diff(t)
    even = np.allclose(gaps, gaps[0], rtol=1e-6, atol=0.0)
    if dt is None:
        dt = float(gaps[0]) if even else float(np.median(gaps))
    if not dt > 0:
        raise ValueError(f"psd_slope needs a positive dt, got {dt}")
    if not (even and np.isclose(dt, gaps[0], rtol=1e-6, atol=0.0)):
        n_grid = int(np.floor((t[-1] - t[0]) / dt)) + 1
        if n_grid > MAX_PSD_GRID_POINTS:
            raise ValueError(
                f"psd_slope: a grid of step {dt} would need {n_grid} points; pass a larger dt"
            )
        grid = t[0] + dt * np.arange(n_grid)
        v = np.interp(grid, t, v)
    n = v.size
    if n < 8:
        raise ValueError(f"psd_slope needs at least 8 grid points, got {n}")
    v = v - (v[0] + (v[-1] - v[0]) * np.arange(n) / (n - 1))
    power = np.abs(np.fft.rfft(v)) ** 2
    freq = np.fft.rfftfreq(n, d=dt)
    j = np.arange(1, (n - 1) // 2 + 1)
    good = power[j] > 0
    if np.count_nonzero(good) < 3:
        raise ValueError("psd_slope: the periodogram has fewer than 3 positive values")
    fit = stats.linregress(np.log10(freq[j][good]), np.log10(power[j][good]))
    return float(-fit.slope), float(fit.stderr)
