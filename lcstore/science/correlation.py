"""Flux–flux correlation of two bands.

Pairs of quasi-simultaneous measurements are formed either by binning both
curves on a common grid (:mod:`lcstore.science.binning`) or by nearest-time
matching (:func:`pair_nearest`); :func:`flux_flux` then gives the rank and
linear correlation coefficients and the log–log slope k of F_y ∝ F_x^k.

Fluxes may be in any (positive, linear) unit; the slope is independent of the
units, the intercepts are in log10 of the units passed in.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import numpy.typing as npt
from scipy import stats

__all__ = ["pair_nearest", "flux_flux", "ols_bisector_slope"]

#: Largest number of (resample × pair) values handled in one bootstrap chunk.
_BOOT_CHUNK = 4_000_000


def pair_nearest(
    tx: npt.ArrayLike,
    x: npt.ArrayLike,
    ty: npt.ArrayLike,
    y: npt.ArrayLike,
    *,
    max_separation: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pair each x measurement with the y measurement nearest in time.

    Every x point with a finite value is matched to the y point (finite value)
    nearest in time (on an exact tie, the earlier y point); the match is kept
    only when ``|ty - tx| <= max_separation``.  Each y point is used at most
    once: when several x points chose the same y point, only the closest in
    time is kept (on a tie, the earlier x point), and the others are dropped
    rather than re-matched to their second-nearest y point, so a pair is
    always a mutual choice of the nearest available measurement.  The work is
    a sort and a binary search, O((N + M) log M).

    Parameters
    ----------
    tx, x : array_like
        Times (days) and values of the first curve.
    ty, y : array_like
        Times (days) and values of the second curve, same time unit.
    max_separation : float
        Largest accepted time difference, in the unit of the times (≥ 0).

    Returns
    -------
    ix, iy : numpy.ndarray of int
        Indices into the input arrays of the paired x and y points, sorted by
        ``ix``.
    separation : numpy.ndarray of float
        ``|ty[iy] - tx[ix]|`` for each pair.
    """
    tx_ = np.asarray(tx, dtype=float)
    ty_ = np.asarray(ty, dtype=float)
    x_ = np.asarray(x, dtype=float)
    y_ = np.asarray(y, dtype=float)
    if tx_.shape != x_.shape or ty_.shape != y_.shape or tx_.ndim != 1 or ty_.ndim != 1:
        raise ValueError(
            "pair_nearest: each curve needs one-dimensional times and values of equal length"
        )
    if not max_separation >= 0:
        raise ValueError(f"max_separation must be >= 0, got {max_separation}")
    empty = (np.empty(0, dtype=np.intp), np.empty(0, dtype=np.intp), np.empty(0))
    okx = np.flatnonzero(np.isfinite(tx_) & np.isfinite(x_))
    oky = np.flatnonzero(np.isfinite(ty_) & np.isfinite(y_))
    if okx.size == 0 or oky.size == 0:
        return empty
    oky = oky[np.argsort(ty_[oky], kind="stable")]
    tys = ty_[oky]
    pos = np.searchsorted(tys, tx_[okx], side="left")
    left = np.clip(pos - 1, 0, tys.size - 1)
    right = np.clip(pos, 0, tys.size - 1)
    d_left = np.abs(tx_[okx] - tys[left])
    d_right = np.abs(tys[right] - tx_[okx])
    choose_right = d_right < d_left
    best = np.where(choose_right, right, left)
    sep = np.where(choose_right, d_right, d_left)
    close = sep <= max_separation
    ix, best, sep = okx[close], best[close], sep[close]
    if ix.size == 0:
        return empty
    # Keep, for each y point, the closest x point (ties: earliest x index).
    order = np.lexsort((ix, sep, best))
    first = np.ones(order.size, dtype=bool)
    first[1:] = best[order][1:] != best[order][:-1]
    keep = order[first]
    keep = keep[np.argsort(ix[keep], kind="stable")]
    return ix[keep], oky[best[keep]], sep[keep]


def ols_bisector_slope(beta1: npt.ArrayLike, beta2: npt.ArrayLike) -> np.ndarray:
    """Slope of the OLS bisector from the two ordinary least-squares slopes.

    Isobe, Feigelson, Akritas & Babu (1990, ApJ 364, 104, Table 1):
    β₃ = [β₁β₂ − 1 + √((1 + β₁²)(1 + β₂²))] / (β₁ + β₂), with β₁ the slope of
    OLS(Y|X) and β₂ that of OLS(X|Y) expressed as dY/dX (= S_yy/S_xy).

    Parameters
    ----------
    beta1, beta2 : array_like
        OLS(Y|X) and OLS(X|Y) slopes (dimensionless, any shape).

    Returns
    -------
    numpy.ndarray
        Bisector slope(s); NaN where ``beta1 + beta2 == 0``.
    """
    b1 = np.asarray(beta1, dtype=float)
    b2 = np.asarray(beta2, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return (b1 * b2 - 1.0 + np.sqrt((1.0 + b1**2) * (1.0 + b2**2))) / (b1 + b2)


def _bootstrap_slopes(
    lx: np.ndarray, ly: np.ndarray, n_boot: int, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray]:
    """Bisector slope and intercept of ``n_boot`` resamples of the pairs."""
    n = lx.size
    rows = max(1, _BOOT_CHUNK // n)
    slopes = np.empty(n_boot)
    intercepts = np.empty(n_boot)
    for start in range(0, n_boot, rows):
        stop = min(n_boot, start + rows)
        idx = rng.integers(0, n, size=(stop - start, n))
        bx, by = lx[idx], ly[idx]
        mx = bx.mean(axis=1)
        my = by.mean(axis=1)
        dx = bx - mx[:, None]
        dy = by - my[:, None]
        sxx = np.einsum("ij,ij->i", dx, dx)
        syy = np.einsum("ij,ij->i", dy, dy)
        sxy = np.einsum("ij,ij->i", dx, dy)
        with np.errstate(divide="ignore", invalid="ignore"):
            b3 = ols_bisector_slope(sxy / sxx, syy / sxy)
        slopes[start:stop] = b3
        intercepts[start:stop] = my - b3 * mx
    return slopes, intercepts


def flux_flux(
    x: npt.ArrayLike,
    y: npt.ArrayLike,
    *,
    n_boot: int = 1000,
    rng: np.random.Generator | None = None,
) -> dict[str, Any]:
    """Correlation coefficients and log–log slope of paired fluxes.

    Correlation coefficients are computed on the fluxes themselves with
    ``scipy.stats``: Pearson r, Spearman ρ and Kendall τ-b, each with its
    two-sided p-value.  The slope k of F_y ∝ F_x^k is fitted in log10 space on
    the pairs where both fluxes are positive (non-positive fluxes have no
    logarithm: they are left out of the fit and counted in
    ``n_nonpositive_excluded``):

    - OLS(Y|X) slope and intercept with their analytic standard errors, as
      ``scipy.stats.linregress``;
    - the OLS bisector (Isobe et al. 1990, ApJ 364, 104, Table 1), which
      treats the two bands symmetrically (the bisector of y on x is the
      reciprocal of that of x on y) and is the reported ``slope``; its error
      is the standard deviation (ddof = 1) of the bisector slopes of
      ``n_boot`` bootstrap resamples of the pairs (Efron 1979).

    Parameters
    ----------
    x, y : array_like
        Paired fluxes of the two bands (equal length, finite, any linear
        flux unit; the units need not be the same for x and y).
    n_boot : int
        Number of bootstrap resamples for the bisector errors (≥ 2).
    rng : numpy.random.Generator, optional
        Random generator for the bootstrap.  Default: a generator seeded with
        0, so that repeated calls on the same data give the same answer.

    Returns
    -------
    dict
        ``n_pairs``, ``pearson_r``, ``pearson_p``, ``spearman_rho``,
        ``spearman_p``, ``kendall_tau``, ``kendall_p``, ``n_log_pairs``,
        ``n_nonpositive_excluded``, ``slope``, ``slope_error``, ``intercept``,
        ``intercept_error`` (bisector, bootstrap errors), ``slope_ols``,
        ``slope_ols_error``, ``intercept_ols``, ``intercept_ols_error``,
        ``slope_bisector``, ``slope_bisector_error``, ``intercept_bisector``,
        ``intercept_bisector_error``, ``n_boot`` and ``method`` (text).
        Intercepts are log10 F_y at log10 F_x = 0 in the units passed in.

    Raises
    ------
    ValueError
        For unequal lengths, non-finite values, fewer than 3 pairs, fewer than
        3 pairs with both fluxes positive, or a constant flux in either band.
    """
    fx = np.asarray(x, dtype=float)
    fy = np.asarray(y, dtype=float)
    if fx.shape != fy.shape or fx.ndim != 1:
        raise ValueError("flux_flux: x and y must be one-dimensional and of equal length")
    if not (np.all(np.isfinite(fx)) and np.all(np.isfinite(fy))):
        raise ValueError("flux_flux: fluxes must be finite (drop NaN pairs first)")
    n = fx.size
    if n < 3:
        raise ValueError(f"flux_flux needs at least 3 pairs, got {n}")
    if n_boot < 2:
        raise ValueError(f"n_boot must be >= 2, got {n_boot}")
    if np.ptp(fx) == 0 or np.ptp(fy) == 0:
        raise ValueError("flux_flux: a constant flux has no correlation coefficient")
    pearson = stats.pearsonr(fx, fy)
    spearman = stats.spearmanr(fx, fy)
    kendall = stats.kendalltau(fx, fy)

    positive = (fx > 0) & (fy > 0)
    n_log = int(np.count_nonzero(positive))
    if n_log < 3:
        raise ValueError(
            f"flux_flux: the log-log slope needs at least 3 pairs with both fluxes positive, "
            f"got {n_log} ({n - n_log} pairs with a non-positive flux excluded)"
        )
    lx = np.log10(fx[positive])
    ly = np.log10(fy[positive])
    if np.ptp(lx) == 0 or np.ptp(ly) == 0:
        raise ValueError("flux_flux: the positive fluxes of one band are constant")
    mx, my = lx.mean(), ly.mean()
    dx, dy = lx - mx, ly - my
    sxx, syy, sxy = float(dx @ dx), float(dy @ dy), float(dx @ dy)
    beta1 = sxy / sxx
    intercept1 = my - beta1 * mx
    r_log = sxy / np.sqrt(sxx * syy)
    if n_log > 2:
        beta1_err = float(np.sqrt(max(0.0, 1.0 - r_log**2) * syy / sxx / (n_log - 2)))
    else:  # pragma: no cover - n_log >= 3 is enforced above
        beta1_err = float("nan")
    intercept1_err = beta1_err * float(np.sqrt(np.mean(lx**2)))
    beta3 = float(ols_bisector_slope(beta1, syy / sxy)) if sxy != 0 else float("nan")
    intercept3 = my - beta3 * mx

    generator = rng if rng is not None else np.random.default_rng(0)
    boot_slope, boot_icpt = _bootstrap_slopes(lx, ly, int(n_boot), generator)
    finite = np.isfinite(boot_slope)
    beta3_err = float(np.std(boot_slope[finite], ddof=1)) if finite.sum() > 1 else float("nan")
    icpt3_err = float(np.std(boot_icpt[finite], ddof=1)) if finite.sum() > 1 else float("nan")

    method = (
        "log10 F_y = intercept + slope * log10 F_x; slope: OLS bisector "
        "(Isobe et al. 1990) with bootstrap error from "
        f"{int(finite.sum())} resamples of the {n_log} pairs with positive fluxes; "
        "slope_ols: OLS(Y|X) with its analytic standard error; correlation "
        "coefficients on the linear fluxes of all pairs"
    )
    return {
        "n_pairs": int(n),
        "pearson_r": float(pearson.statistic),
        "pearson_p": float(pearson.pvalue),
        "spearman_rho": float(spearman.statistic),
        "spearman_p": float(spearman.pvalue),
        "kendall_tau": float(kendall.statistic),
        "kendall_p": float(kendall.pvalue),
        "n_log_pairs": n_log,
        "n_nonpositive_excluded": int(n - n_log),
        "slope": beta3,
        "slope_error": beta3_err,
        "intercept": float(intercept3),
        "intercept_error": icpt3_err,
        "slope_ols": float(beta1),
        "slope_ols_error": beta1_err,
        "intercept_ols": float(intercept1),
        "intercept_ols_error": float(intercept1_err),
        "slope_bisector": beta3,
        "slope_bisector_error": beta3_err,
        "intercept_bisector": float(intercept3),
        "intercept_bisector_error": icpt3_err,
        "n_boot": int(n_boot),
        "method": method,
    }
