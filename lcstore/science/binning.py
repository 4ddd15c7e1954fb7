"""Time binning of light curves: fixed-width bins and Bayesian blocks.

All functions work on plain float arrays **in flux space** (flux density,
energy flux, photon flux or count rate, in any one unit); magnitudes must be
converted to fluxes by the caller before binning, because averaging
magnitudes biases the mean towards the faint end. Times are days (MJD in
the TDB scale in lcstore's canonical form, but any day-valued axis works).

Rules shared by every binning function (see :func:`aggregate`):

* detections with a finite positive error on every point of the bin are
  combined with the inverse-variance weighted mean and its standard error
  (Bevington & Robinson 2003, *Data Reduction and Error Analysis for the
  Physical Sciences*, 3rd ed., eqs. 4.17-4.19);
* if one or more detections of a bin lack an error, the bin is the plain
  mean of its detections with the standard error of the mean s/sqrt(n)
  (sample standard deviation with ``ddof=1``; NaN for a single point);
* upper limits in a bin that has detections are left out; a bin with only
  upper limits returns the most constraining (smallest) limit, flagged;
* empty bins are not returned.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
from astropy.stats import bayesian_blocks
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "BinnedCurve",
    "BinningError",
    "PartialsOutOfRange",
    "aggregate",
    "bin_blocks",
    "bin_fixed",
    "bin_fixed_from_partials",
    "parse_bin_width",
    "weighted_mean",
]

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]
IntArray = NDArray[np.int64]

# Largest bin index that stays exact in float64 (and fits int64).
_MAX_EXACT_BINS = 2**52

# Points handled per piece by the accumulating loops (see _chunks).
_CHUNK_POINTS = 1 << 17

# For a span of bins at most this many times the number of points (plus a
# constant), the compression of occupied bins uses a span-sized bincount,
# which is linear; sparser spans fall back to np.unique (sorting the points).
_DENSE_SPAN_FACTOR = 4
_DENSE_SPAN_EXTRA = 65536

# Smallest normal float64: unscaled sums of 1/σ² below it have lost precision.
_TINY = float(np.finfo(float).tiny)

_UNIT_DAYS = {"d": 1.0, "h": 1.0 / 24.0, "min": 1.0 / 1440.0, "s": 1.0 / 86400.0}
_WIDTH_PATTERN = re.compile(
    r"^\s*(?P<number>[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(?P<unit>[A-Za-z]*)\s*$"
)


class BinningError(ValueError):
    """Raised when a binning request cannot be honoured (bad width, too many bins, ...)."""


class PartialsOutOfRange(BinningError):
    """Per-bin sums that cannot give the exact answer (1/σ² outside the normal float range)."""


@dataclass(frozen=True, eq=False)
class BinnedCurve:
    """A binned light curve, one element per non-empty bin, sorted by time.

    Attributes
    ----------
    time : ndarray of float
        Bin centre, days (same time axis as the input).
    time_lo, time_hi : ndarray of float
        Bin edges, days; ``time = (time_lo + time_hi) / 2``.
    value : ndarray of float
        Mean flux of the bin (input flux unit), or the most constraining
        upper limit for a bin that holds only limits.
    error : ndarray of float
        One-sigma error of ``value`` (input flux unit); NaN when undefined
        (limits-only bins, or one detection without an error).
    upper_limit : ndarray of bool
        True for bins that hold only upper limits.
    n : ndarray of int
        Number of detections averaged; for a limits-only bin, the number
        of limits in it.
    """

    time: FloatArray
    time_lo: FloatArray
    time_hi: FloatArray
    value: FloatArray
    error: FloatArray
    upper_limit: BoolArray
    n: IntArray

    def __post_init__(self) -> None:
        sizes = {
            np.shape(getattr(self, name))
            for name in (
                "time",
                "time_lo",
                "time_hi",
                "value",
                "error",
                "upper_limit",
                "n",
            )
        }
        if len(sizes) != 1:
            raise BinningError("all columns of a BinnedCurve must have the same length")

    def __len__(self) -> int:
        return int(self.time.shape[0])

    @classmethod
    def empty(cls) -> BinnedCurve:
        """Return a curve with no bins."""
        nothing = np.empty(0, dtype=float)
        return cls(
            time=nothing,
            time_lo=nothing.copy(),
            time_hi=nothing.copy(),
            value=nothing.copy(),
            error=nothing.copy(),
            upper_limit=np.empty(0, dtype=bool),
            n=np.empty(0, dtype=np.int64),
        )


def parse_bin_width(text: str) -> float:
    """Parse a bin width such as ``'1d'``, ``'6h'``, ``'30min'``, ``'3600s'`` into days.

    Parameters
    ----------
    text : str
        A positive number followed by an optional unit: ``d`` (days),
        ``h`` (hours), ``min`` (minutes) or ``s`` (seconds), case-insensitive,
        with optional whitespace. A plain number is a number of days.

    Returns
    -------
    float
        The width in days (1 h = 1/24 d, 1 min = 1/1440 d, 1 s = 1/86400 d).

    Raises
    ------
    BinningError
        If the text cannot be read or the width is not a finite positive number.
    """
    match = _WIDTH_PATTERN.match(text) if isinstance(text, str) else None
    if match is None:
        raise BinningError(
            f"cannot read bin width {text!r}: give a positive number of days or a number "
            "with a unit d, h, min or s (for example '1d', '6h', '30min', '3600s', '2.5')"
        )
    unit = match["unit"].lower() or "d"
    if unit not in _UNIT_DAYS:
        raise BinningError(
            f"unknown unit {match['unit']!r} in bin width {text!r}: use d, h, min or s"
        )
    width = float(match["number"]) * _UNIT_DAYS[unit]
    if not math.isfinite(width) or width <= 0.0:
        raise BinningError(f"bin width must be a finite positive duration, got {text!r}")
    return width


def _as_points(
    time: ArrayLike,
    value: ArrayLike,
    error: ArrayLike | None,
    upper_limit: ArrayLike | None,
) -> tuple[FloatArray, FloatArray, FloatArray | None, BoolArray | None]:
    """Check and convert the point columns to 1-D arrays of equal length (None stays None)."""
    t = np.asarray(time, dtype=float)
    v = np.asarray(value, dtype=float)
    if t.ndim != 1 or v.shape != t.shape:
        raise BinningError("time and value must be one-dimensional arrays of the same length")
    e = None if error is None else np.asarray(error, dtype=float)
    ul = None if upper_limit is None else np.asarray(upper_limit, dtype=bool)
    if (e is not None and e.shape != t.shape) or (ul is not None and ul.shape != t.shape):
        raise BinningError("error and upper_limit must have the same length as time")
    if not np.isfinite(t).all():
        raise BinningError("every time must be a finite number")
    if not np.isfinite(v).all():
        raise BinningError("every value (and upper limit) must be a finite number")
    return t, v, e, ul


def _chunks(n_points: int, n_groups: int) -> list[slice]:
    """Slices that walk the points in cache-sized pieces.

    Working through large inputs piece by piece reuses small buffers instead
    of creating several N-sized temporaries: on big inputs, first touching
    fresh memory costs more than the arithmetic. A piece is never smaller
    than the number of groups, so the per-piece bincounts stay linear.
    """
    step = max(_CHUNK_POINTS, n_groups)
    return [slice(start, min(start + step, n_points)) for start in range(0, n_points, step)]


def _usable_error(
    error: FloatArray, upper_limit: BoolArray | None, out: BoolArray, scratch: BoolArray
) -> BoolArray:
    """Detections whose error is finite and positive (NaN compares False), into ``out``."""
    with np.errstate(invalid="ignore"):
        np.greater(error, 0.0, out=out)
        out &= np.less(error, np.inf, out=scratch)
    if upper_limit is not None:
        out &= np.logical_not(upper_limit, out=scratch)
    return out


def _detections(
    index: IntArray, value: FloatArray, upper_limit: BoolArray | None
) -> tuple[IntArray, FloatArray]:
    """Index and value of the detections only."""
    if upper_limit is None:
        return index, value
    keep = ~upper_limit
    return index[keep], value[keep]


def aggregate(
    index: ArrayLike,
    value: ArrayLike,
    error: ArrayLike | None,
    upper_limit: ArrayLike | None,
    n_groups: int,
) -> tuple[FloatArray, FloatArray, BoolArray, IntArray]:
    """Combine points into groups (bins) with lcstore's binning rules.

    For each group the detections (``upper_limit`` False) are combined:

    * if every detection has a finite positive error σ_i, with the
      inverse-variance weighted mean x̄ = Σ(x_i/σ_i²) / Σ(1/σ_i²) and its
      error σ_x̄ = (Σ 1/σ_i²)^(-1/2) (Bevington & Robinson 2003, 3rd ed.,
      eqs. 4.17-4.19);
    * if some or all detections have no usable error (NaN, infinite, zero or
      negative), the given errors of that group are ignored and the group is
      the plain mean of its detections with the standard error of the mean
      s/√n, where s is the sample standard deviation (ddof = 1); NaN for a
      single detection. Weighting only the points that carry an error would
      silently drop the others, and inventing an error for them has no
      basis, so a mixed group falls back to the unweighted estimate.

    Upper limits in a group with detections are left out (``n`` counts the
    detections only). A group with only upper limits returns the smallest
    (most constraining) limit, ``upper_limit`` True, error NaN, and ``n``
    the number of limits. An empty group returns NaN, NaN, False, 0.

    Parameters
    ----------
    index : array_like of int, shape (N,)
        Group of each point, ``0 <= index < n_groups``.
    value : array_like of float, shape (N,)
        Fluxes (any one flux unit; never magnitudes) or limit values.
    error : array_like of float, shape (N,), or None
        One-sigma errors in the unit of ``value``; NaN (or None for all)
        means no error.
    upper_limit : array_like of bool, shape (N,), or None
        True where ``value`` is an upper limit (None: no limits).
    n_groups : int
        Number of groups.

    Returns
    -------
    value, error : ndarray of float, shape (n_groups,)
        Group mean (or limit) and its error, in the unit of ``value``.
    upper_limit : ndarray of bool, shape (n_groups,)
        True for limits-only groups.
    n : ndarray of int, shape (n_groups,)
        Detections averaged, or limits in a limits-only group.

    Notes
    -----
    Fully vectorised: the sums are ``np.bincount`` with weights and the
    per-group minimum of the limits is ``np.minimum.at``, applied to pieces
    of 131072 points or more (a loop over pieces, never over points); the
    cost is linear in N plus n_groups. Weights are scaled by the smallest error
    before summing, so errors of any magnitude (e.g. 1e-13 erg cm^-2 s^-1)
    neither overflow nor underflow.
    """
    idx = np.asarray(index)
    if idx.ndim != 1 or not (idx.size == 0 or np.issubdtype(idx.dtype, np.integer)):
        raise BinningError("index must be a one-dimensional array of integers")
    n_groups = int(n_groups)
    if n_groups < 0:
        raise BinningError("n_groups must not be negative")
    if idx.size and (idx.min() < 0 or idx.max() >= n_groups):
        raise BinningError("every index must lie in 0 .. n_groups - 1")
    idx = idx.astype(np.intp, copy=False)
    v = np.asarray(value, dtype=float)
    e = None if error is None else np.asarray(error, dtype=float)
    ul = None if upper_limit is None else np.asarray(upper_limit, dtype=bool)
    if v.shape != idx.shape or any(x is not None and x.shape != idx.shape for x in (e, ul)):
        raise BinningError("index, value, error and upper_limit must have the same length")

    if ul is not None and not ul.any():
        ul = None
    chunks = _chunks(idx.size, n_groups)
    step = max((part.stop - part.start for part in chunks), default=0)
    good_buffer, scratch_buffer = np.empty(step, dtype=bool), np.empty(step, dtype=bool)
    weight_buffer = np.empty(step)

    def usable(part: slice) -> BoolArray:
        """Mask of detections with a usable error in one piece (reused buffer)."""
        assert e is not None
        m = part.stop - part.start
        limits = None if ul is None else ul[part]
        return _usable_error(e[part], limits, good_buffer[:m], scratch_buffer[:m])

    # Pass 1: counts per group, and the smallest usable error (weight scale).
    n_all = np.zeros(n_groups, dtype=np.int64)
    n_lim_f = np.zeros(n_groups)
    n_usable = 0
    scale = math.inf
    for part in chunks:
        i = idx[part]
        n_all += np.bincount(i, minlength=n_groups)
        if ul is not None:
            n_lim_f += np.bincount(i, weights=ul[part], minlength=n_groups)
        if e is not None:
            good = usable(part)
            n_good = int(np.count_nonzero(good))
            n_usable += n_good
            if n_good == good.size:
                scale = min(scale, float(e[part].min()))
            elif n_good:
                scale = min(scale, float(np.min(np.where(good, e[part], np.inf))))
    n_lim = n_lim_f.astype(np.int64)
    n_det = n_all - n_lim
    if n_usable == idx.size - int(n_lim.sum()):
        n_err = n_det  # every detection has a usable error: no plain-mean group
    elif n_usable == 0:
        n_err = np.zeros(n_groups, dtype=np.int64)
    else:
        n_err_f = np.zeros(n_groups)
        for part in chunks:
            n_err_f += np.bincount(idx[part], weights=usable(part), minlength=n_groups)
        n_err = n_err_f.astype(np.int64)

    out_value = np.full(n_groups, np.nan)
    out_error = np.full(n_groups, np.nan)

    # Inverse-variance weighted groups (Bevington & Robinson eqs. 4.17-4.19).
    # Weights are 1/σ² in units of 1/scale², zero where the error is unusable.
    weighted = (n_det > 0) & (n_err == n_det)
    if e is not None and weighted.any():
        sum_w = np.zeros(n_groups)
        sum_wx = np.zeros(n_groups)
        for part in chunks:
            i = idx[part]
            w = weight_buffer[: part.stop - part.start]
            good = usable(part)
            if good.all():
                np.divide(scale, e[part], out=w)
            else:
                w.fill(0.0)
                np.divide(scale, e[part], out=w, where=good)
            w *= w
            sum_w += np.bincount(i, weights=w, minlength=n_groups)
            w *= v[part]
            sum_wx += np.bincount(i, weights=w, minlength=n_groups)
        out_value[weighted] = sum_wx[weighted] / sum_w[weighted]
        out_error[weighted] = scale / np.sqrt(sum_w[weighted])

    # Groups with detections lacking errors: plain mean and s/sqrt(n), ddof=1
    # (two passes: the mean, then the squared deviations from it).
    plain = n_det > n_err
    if plain.any():
        sum_x = np.zeros(n_groups)
        for part in chunks:
            i, x = _detections(idx[part], v[part], None if ul is None else ul[part])
            sum_x += np.bincount(i, weights=x, minlength=n_groups)
        mean = sum_x / np.maximum(n_det, 1)
        squares = np.zeros(n_groups)
        for part in chunks:
            i, x = _detections(idx[part], v[part], None if ul is None else ul[part])
            deviation = np.subtract(x, mean[i])
            deviation *= deviation
            squares += np.bincount(i, weights=deviation, minlength=n_groups)
        out_value[plain] = mean[plain]
        several = plain & (n_det > 1)
        n_sev = n_det[several]
        out_error[several] = np.sqrt(squares[several] / (n_sev - 1)) / np.sqrt(n_sev)

    # Limits-only groups: the most constraining (smallest) limit.
    limits_only = (n_det == 0) & (n_lim > 0)
    if ul is not None and limits_only.any():
        smallest = np.full(n_groups, np.inf)
        for part in chunks:
            i = idx[part]
            wanted = ul[part] & limits_only[i]  # limits of limits-only groups
            np.minimum.at(smallest, i[wanted], v[part][wanted])
        out_value[limits_only] = smallest[limits_only]

    n_out = np.where(n_det > 0, n_det, n_lim).astype(np.int64)
    return out_value, out_error, limits_only, n_out


def weighted_mean(
    value: ArrayLike, error: ArrayLike | None, upper_limit: ArrayLike | None
) -> tuple[float, float, bool, int]:
    """Combine all points into one value with the rules of :func:`aggregate`.

    Used for one-off combinations such as the points of an SED snapshot
    window. Inverse-variance weighted mean (Bevington & Robinson 2003,
    eqs. 4.17-4.19) when every detection has an error, otherwise the plain
    mean and standard error; limits only: the smallest limit, flagged.

    Parameters
    ----------
    value : array_like of float
        Fluxes (any one flux unit) or limit values.
    error : array_like of float or None
        One-sigma errors (NaN: none).
    upper_limit : array_like of bool or None
        True where ``value`` is an upper limit.

    Returns
    -------
    value : float
        Mean flux, or the smallest limit; NaN for no points.
    error : float
        Its one-sigma error; NaN when undefined.
    upper_limit : bool
        True if only upper limits were given.
    n : int
        Detections averaged (or limits, for a limits-only result).
    """
    v = np.atleast_1d(np.asarray(value, dtype=float))
    if v.ndim != 1:
        raise BinningError("value must be one-dimensional")
    if not np.all(np.isfinite(v)):
        raise BinningError("every value (and upper limit) must be a finite number")
    err = None if error is None else np.atleast_1d(np.asarray(error, dtype=float))
    lim = None if upper_limit is None else np.atleast_1d(np.asarray(upper_limit, dtype=bool))
    index = np.zeros(v.shape, dtype=np.intp)
    mean, sigma, limit, n = aggregate(index, v, err, lim, 1)
    return float(mean[0]), float(sigma[0]), bool(limit[0]), int(n[0])


def _fixed_bin_index(t: FloatArray, width: float, origin: float) -> IntArray:
    """Return the integer k with origin + k·width <= t < origin + (k + 1)·width.

    ``floor((t - origin) / width)`` can be off by one for a time that lies
    on an edge after rounding; the correction makes the assignment agree
    with the edges reported (computed the same way), so it is monotonic.
    Works piece by piece in two reused float buffers and one mask.
    """
    out = np.empty(t.shape, dtype=np.int64)
    step = min(_CHUNK_POINTS, t.size)
    k_buffer, edge_buffer = np.empty(step), np.empty(step)
    mask_buffer = np.empty(step, dtype=bool)
    for part in _chunks(t.size, 0):
        piece = t[part]
        m = piece.size
        k, edge, off_edge = k_buffer[:m], edge_buffer[:m], mask_buffer[:m]
        np.subtract(piece, origin, out=k)
        k /= width
        np.floor(k, out=k)
        np.multiply(k, width, out=edge)
        edge += origin
        np.less(piece, edge, out=off_edge)
        k -= off_edge
        np.add(k, 1.0, out=edge)
        edge *= width
        edge += origin
        np.greater_equal(piece, edge, out=off_edge)
        k += off_edge
        out[part] = k
    return out


def bin_fixed(
    time: ArrayLike,
    value: ArrayLike,
    error: ArrayLike | None,
    upper_limit: ArrayLike | None,
    *,
    width: float,
    origin: float = 0.0,
    max_bins: int | None = None,
) -> BinnedCurve:
    """Bin a light curve into fixed-width time bins aligned at ``origin``.

    Bin k covers ``[origin + k·width, origin + (k + 1)·width)`` for every
    integer k (negative k included), so with ``origin = 0`` and a width of
    one day the bins are whole MJDs. Points in a bin are combined with
    :func:`aggregate` (inverse-variance weighted mean, Bevington & Robinson
    2003, eqs. 4.17-4.19; plain mean and standard error without errors;
    upper-limit rules). Empty bins are not returned.

    Parameters
    ----------
    time : array_like of float, shape (N,)
        Times, days (e.g. MJD TDB). Order does not matter.
    value : array_like of float, shape (N,)
        Fluxes in one flux unit (never magnitudes), or limit values.
    error : array_like of float, shape (N,), or None
        One-sigma errors in the unit of ``value``; NaN means no error.
    upper_limit : array_like of bool, shape (N,), or None
        True where ``value`` is an upper limit.
    width : float
        Bin width, days (see :func:`parse_bin_width`).
    origin : float, optional
        A bin edge, days (default 0, i.e. MJD 0).
    max_bins : int, optional
        Refuse requests whose time span would cover more than this many
        bins. The count is ``k(t_max) - k(t_min) + 1`` with
        ``k(t) = floor((t - origin) / width)``: every bin between the first
        and the last point, occupied or not. It is checked from the two
        extreme times before any per-bin array exists.

    Returns
    -------
    BinnedCurve
        One row per non-empty bin, in time order.

    Raises
    ------
    BinningError
        Bad width or origin, mismatched inputs, non-finite times or values,
        or more bins than ``max_bins``.

    Notes
    -----
    Cost is linear in N: bin indices by ``np.floor``; occupied bins are
    compressed by a bincount over the span when the span is at most a few
    times N, otherwise by ``np.unique`` — never an array the size of a
    sparse span.
    """
    width = float(width)
    origin = float(origin)
    if not math.isfinite(width) or width <= 0.0:
        raise BinningError(f"bin width must be a finite positive number of days, got {width}")
    if not math.isfinite(origin):
        raise BinningError(f"bin origin must be a finite time, got {origin}")
    t, v, e, ul = _as_points(time, value, error, upper_limit)
    if t.size == 0:
        return BinnedCurve.empty()

    # The bin count is checked from the two extreme times alone, before
    # any per-point or per-bin array is made.
    t_min, t_max = float(t.min()), float(t.max())
    first_last = np.floor((np.array([t_min, t_max]) - origin) / width)
    if not np.all(np.abs(first_last) < _MAX_EXACT_BINS):
        raise BinningError(f"a bin width of {width:g} d is too small for these times")
    k_first, k_last = (int(k) for k in _fixed_bin_index(np.array([t_min, t_max]), width, origin))
    n_span = k_last - k_first + 1
    if max_bins is not None and n_span > max_bins:
        raise BinningError(
            f"a bin width of {width:g} d over this time range would make {n_span} bins, "
            f"more than the limit of {max_bins}; choose a wider bin or a shorter range"
        )

    offset = _fixed_bin_index(t, width, origin)
    offset -= k_first
    span = n_span
    if span <= _DENSE_SPAN_FACTOR * t.size + _DENSE_SPAN_EXTRA:
        counts = np.bincount(offset, minlength=span)
        occupied = np.flatnonzero(counts)
        if occupied.size == span:
            group = offset  # every bin of the span is occupied
        else:
            lookup = np.empty(span, dtype=np.intp)
            lookup[occupied] = np.arange(occupied.size)
            group = lookup[offset]
    else:
        occupied, group = np.unique(offset, return_inverse=True)

    mean, sigma, limit, n = aggregate(group, v, e, ul, occupied.size)
    return _fixed_bins_curve(k_first + occupied, width, origin, mean, sigma, limit, n)


def _fixed_bins_curve(
    k: np.ndarray,
    width: float,
    origin: float,
    value: np.ndarray,
    error: np.ndarray,
    upper_limit: np.ndarray,
    n: np.ndarray,
) -> BinnedCurve:
    """The curve of fixed bins with indices ``k``: edges origin + k·width, centres midway.

    One place for both fixed-bin paths (points and SQL partial sums), so their
    edges are the same floats.
    """
    kf = np.asarray(k).astype(float)
    lo = origin + kf * width
    hi = origin + (kf + 1.0) * width
    return BinnedCurve(
        time=0.5 * (lo + hi),
        time_lo=lo,
        time_hi=hi,
        value=value,
        error=error,
        upper_limit=upper_limit,
        n=n,
    )


def bin_fixed_from_partials(
    k: ArrayLike,
    *,
    n_det: ArrayLike,
    n_lim: ArrayLike,
    n_err: ArrayLike,
    sum_w: ArrayLike,
    sum_wx: ArrayLike,
    mean: ArrayLike,
    m2: ArrayLike,
    min_limit: ArrayLike,
    factor: ArrayLike | float = 1.0,
    width: float,
    origin: float = 0.0,
    max_bins: int | None = None,
) -> BinnedCurve:
    """Fixed-width bins from per-bin sums, with the rules of :func:`bin_fixed`.

    A database can bin in one pass without sending the points: it groups them
    by bin index (and by anything else it is asked to, so one bin may arrive
    as several *parts*) and returns a few sums per part. This function
    applies a multiplicative factor per part (an inter-calibration factor
    scales values and errors alike), merges the parts of each bin and then
    applies the rules of :func:`aggregate`: the inverse-variance weighted
    mean x̄ = Σ(x/σ²)/Σ(1/σ²) with error (Σ 1/σ²)^(-1/2) when every detection
    of the bin has a finite positive error (Bevington & Robinson 2003, eqs.
    4.17-4.19); otherwise the plain mean of the detections and s/√n (ddof =
    1, NaN for one detection); a bin of limits only: the smallest limit,
    flagged; ``n`` as in :func:`aggregate`. Bin edges as in :func:`bin_fixed`.

    Parameters
    ----------
    k : array_like of int, shape (P,)
        Bin index of each part, the k of :func:`bin_fixed`:
        ``origin + k·width <= t < origin + (k + 1)·width``. Any order;
        repeated k are parts of one bin.
    n_det, n_lim, n_err : array_like of int, shape (P,)
        Detections, upper limits, and detections with a finite positive
        error, per part.
    sum_w, sum_wx : array_like of float, shape (P,)
        Σ 1/σ² and Σ x/σ² over the detections with a usable error (any
        value where ``n_err`` is 0).
    mean, m2 : array_like of float, shape (P,)
        Mean of the detections of the part and Σ (x − mean)² over them (any
        value where ``n_det`` is 0).
    min_limit : array_like of float, shape (P,)
        Smallest upper limit of the part (any value where ``n_lim`` is 0).
    factor : array_like of float, shape (P,), or float
        Positive finite factor applied to the values and errors of each part:
        x → f·x and σ → f·σ, so Σ1/σ² → Σ1/σ² / f², Σx/σ² → Σx/σ² / f,
        mean → f·mean, m2 → f²·m2, limits → f·limit.
    width, origin, max_bins
        As in :func:`bin_fixed`.

    Returns
    -------
    BinnedCurve
        One row per bin with a detection or a limit, in time order.

    Raises
    ------
    PartialsOutOfRange
        A weighted sum is not a finite positive normal float (1/σ² out of
        range): the sums cannot give the answer, :func:`bin_fixed` on the
        points can (it scales its weights).
    BinningError
        As :func:`bin_fixed` (bad width or origin, too many bins).

    Notes
    -----
    Parts of a bin are merged with the pairwise update of the squared
    deviations, Σ(x − x̄)² = Σ_p [m2_p + n_p (x̄_p − x̄)²] (Chan, Golub &
    LeVeque 1983, Am. Stat. 37, 242; the update from memory), which keeps
    the accuracy of the two-pass sums of :func:`aggregate`. The results equal
    those of :func:`bin_fixed` on the same points up to rounding (the sums
    are added in another order).
    """
    width = float(width)
    origin = float(origin)
    if not math.isfinite(width) or width <= 0.0:
        raise BinningError(f"bin width must be a finite positive number of days, got {width}")
    if not math.isfinite(origin):
        raise BinningError(f"bin origin must be a finite time, got {origin}")
    kk = np.asarray(k, dtype=np.int64)
    if kk.ndim != 1:
        raise BinningError("k must be one-dimensional")
    given = (n_det, n_lim, n_err, sum_w, sum_wx, mean, m2, min_limit)
    nd, nl, ne, sw, swx, mu, m2a, lim = (np.asarray(a, dtype=float) for a in given)
    f = np.broadcast_to(np.asarray(factor, dtype=float), kk.shape)
    if any(a.shape != kk.shape for a in (nd, nl, ne, sw, swx, mu, m2a, lim)):
        raise BinningError("every column of the partial sums must have the length of k")
    if not np.all(np.isfinite(f) & (f > 0.0)):
        raise BinningError("factors must be finite positive numbers")
    keep = (nd + nl) > 0
    if not keep.all():
        kk, f = kk[keep], f[keep]
        nd, nl, ne, sw, swx, mu, m2a, lim = (a[keep] for a in (nd, nl, ne, sw, swx, mu, m2a, lim))
    if kk.size == 0:
        return BinnedCurve.empty()

    occupied, group = np.unique(kk, return_inverse=True)
    group = group.ravel()
    if not np.all(np.abs(occupied[[0, -1]]) < _MAX_EXACT_BINS):
        raise BinningError(f"a bin width of {width:g} d is too small for these times")
    n_span = int(occupied[-1] - occupied[0]) + 1
    if max_bins is not None and n_span > max_bins:
        raise BinningError(
            f"a bin width of {width:g} d over this time range would make {n_span} bins, "
            f"more than the limit of {max_bins}; choose a wider bin or a shorter range"
        )
    n_groups = occupied.size

    def total(x: FloatArray, where: BoolArray) -> FloatArray:
        return np.bincount(group, weights=np.where(where, x, 0.0), minlength=n_groups)

    n_det_g = np.bincount(group, weights=nd, minlength=n_groups).astype(np.int64)
    n_lim_g = np.bincount(group, weights=nl, minlength=n_groups).astype(np.int64)
    n_err_g = np.bincount(group, weights=ne, minlength=n_groups).astype(np.int64)
    out_value = np.full(n_groups, np.nan)
    out_error = np.full(n_groups, np.nan)

    # Inverse-variance weighted bins (Bevington & Robinson eqs. 4.17-4.19).
    weighted = (n_det_g > 0) & (n_err_g == n_det_g)
    if weighted.any():
        has_err = ne > 0
        with np.errstate(all="ignore"):
            sum_w_g = total(sw / (f * f), has_err)[weighted]
            sum_wx_g = total(swx / f, has_err)[weighted]
        usable = np.isfinite(sum_w_g) & (sum_w_g >= _TINY) & np.isfinite(sum_wx_g)
        if not usable.all():
            raise PartialsOutOfRange("weighted sums out of the float range: bin the points")
        out_value[weighted] = sum_wx_g / sum_w_g
        out_error[weighted] = 1.0 / np.sqrt(sum_w_g)

    # Bins with a detection lacking an error: plain mean and s/sqrt(n), ddof = 1.
    plain = n_det_g > n_err_g
    if plain.any():
        has_det = nd > 0
        part_mean = mu * f
        merged = total(part_mean * nd, has_det) / np.maximum(n_det_g, 1)
        single = np.bincount(group, weights=has_det, minlength=n_groups) == 1
        if single.any():  # one part: its own mean, not mean·n/n
            merged[group[has_det & single[group]]] = part_mean[has_det & single[group]]
        deviation = np.where(has_det, part_mean - merged[group], 0.0)
        squares = total(m2a * (f * f) + nd * deviation * deviation, has_det)
        out_value[plain] = merged[plain]
        several = plain & (n_det_g > 1)
        n_sev = n_det_g[several]
        out_error[several] = np.sqrt(squares[several] / (n_sev - 1)) / np.sqrt(n_sev)

    # Limits-only bins: the most constraining (smallest) limit.
    limits_only = (n_det_g == 0) & (n_lim_g > 0)
    if limits_only.any():
        smallest = np.full(n_groups, np.inf)
        wanted = (nl > 0) & limits_only[group]
        np.minimum.at(smallest, group[wanted], lim[wanted] * f[wanted])
        out_value[limits_only] = smallest[limits_only]

    n = np.where(n_det_g > 0, n_det_g, n_lim_g).astype(np.int64)
    return _fixed_bins_curve(occupied, width, origin, out_value, out_error, limits_only, n)


def bin_blocks(
    time: ArrayLike,
    value: ArrayLike,
    error: ArrayLike | None,
    upper_limit: ArrayLike | None,
    *,
    p0: float = 0.05,
    max_bins: int | None = None,
) -> BinnedCurve:
    """Bin a light curve into Bayesian blocks (Scargle et al. 2013, ApJ 764, 167).

    The block edges are the optimal segmentation of the detections into
    constant-flux blocks, computed by ``astropy.stats.bayesian_blocks`` with
    the point-measures fitness for Gaussian errors (Scargle et al. 2013,
    eq. 41 with the block sums of eqs. 31-32) and the false-alarm prior
    ``p0`` (their eq. 21, in the corrected form astropy uses). Upper limits do
    not take part in the segmentation; the first and last edges are moved
    out, if needed, to cover them, and each block is then combined with
    :func:`aggregate` (inverse-variance weighted mean; upper-limit rules).
    A block of only limits can therefore appear only at either end.

    Parameters
    ----------
    time : array_like of float, shape (N,)
        Times, days.
    value : array_like of float, shape (N,)
        Fluxes in one flux unit (never magnitudes), or limit values.
    error : array_like of float, shape (N,), or None
        One-sigma errors; every detection needs a finite positive one.
    upper_limit : array_like of bool, shape (N,), or None
        True where ``value`` is an upper limit.
    p0 : float, optional
        False-alarm probability of a change point, 0 < p0 < 1 (default 0.05).
    max_bins : int, optional
        Refuse results with more blocks than this.

    Returns
    -------
    BinnedCurve
        One row per block, in time order; ``time_lo``/``time_hi`` are the
        block edges.

    Raises
    ------
    BinningError
        A detection without a finite positive error, ``p0`` outside (0, 1),
        or more blocks than ``max_bins``.

    Notes
    -----
    The astropy measures fitness refuses repeated times, so detections that
    share a time are first combined into their weighted mean. That leaves
    the block sums the fitness uses (Σ1/σ² and Σx/σ², eqs. 31-32) unchanged; only the number
    of cells N in the prior of eq. 21 counts distinct times. With fewer than
    two distinct detection times the whole curve is one block. The dynamic
    programme is O(N²) in the number of distinct detection times.
    """
    p0 = float(p0)
    if not 0.0 < p0 < 1.0:
        raise BinningError(f"p0 must lie strictly between 0 and 1, got {p0}")
    t, v, e, ul = _as_points(time, value, error, upper_limit)
    if t.size == 0:
        return BinnedCurve.empty()

    errors = np.full(t.shape, np.nan) if e is None else e
    if ul is None:
        t_det, v_det, e_det = t, v, errors
    else:
        detection = ~ul
        t_det, v_det, e_det = t[detection], v[detection], errors[detection]
    with np.errstate(invalid="ignore"):
        if not np.all((e_det > 0.0) & (e_det < np.inf)):
            raise BinningError(
                "blocks need an error on every detection: some detections have no finite "
                "positive error; use fixed-width bins instead"
            )

    distinct, inverse = np.unique(t_det, return_inverse=True)
    if distinct.size >= 2:
        # Combine repeated times (weighted mean), keeping sorted order.
        x, sigma, _, _ = aggregate(inverse.ravel(), v_det, e_det, None, distinct.size)
        edges = np.asarray(
            bayesian_blocks(distinct, x, sigma, fitness="measures", p0=p0), dtype=float
        )
    else:
        edges = np.array([t.min(), t.max()])
    edges[0] = min(edges[0], t.min())
    edges[-1] = max(edges[-1], t.max())

    n_blocks = edges.size - 1
    if max_bins is not None and n_blocks > max_bins:
        raise BinningError(
            f"Bayesian blocks with p0 = {p0:g} found {n_blocks} blocks, more than the limit "
            f"of {max_bins}; use a smaller p0 or a shorter range"
        )
    group = np.clip(np.searchsorted(edges, t, side="right") - 1, 0, n_blocks - 1)
    mean, sigma, limit, n = aggregate(group, v, e, ul, n_blocks)
    keep = n > 0
    lo, hi = edges[:-1][keep], edges[1:][keep]
    return BinnedCurve(
        time=0.5 * (lo + hi),
        time_lo=lo,
        time_hi=hi,
        value=mean[keep],
        error=sigma[keep],
        upper_limit=limit[keep],
        n=n[keep],
    )
