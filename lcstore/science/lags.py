"""Cross-correlation lag functions of two unevenly sampled light curves.

Three estimators, each returning a :class:`LagFunction`:

- :func:`dcf` — the discrete correlation function of Edelson & Krolik
  (1988, ApJ 333, 646), optionally with the local normalisation of Welsh
  (1999, PASP 111, 1347);
- :func:`zdcf` — the z-transformed DCF with equal-population lag bins of
  Alexander (1997, in Astronomical Time Series, ASSL 218, 163);
- :func:`iccf` — the interpolated cross-correlation function of Gaskell &
  Peterson (1987, ApJS 65, 1).

:func:`peak_and_centroid` reads the peak and centroid lags off a lag
function, :func:`lag_uncertainty` gives their distributions by flux
randomisation and random subset selection (Peterson et al. 1998, PASP 110,
660), and :func:`lag_significance` gives the levels that uncorrelated red
noise reaches (Timmer & König 1995 simulations, :mod:`.simulate`).

Sign convention: a pair (i, j) has time difference Δt_ij = tb_j − ta_i, so a
**positive lag means that curve b (y) lags behind curve a (x)**.  Times and
lags share one unit (days in lcstore); fluxes may be in any linear unit
(each curve in its own), and the coefficients are dimensionless.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from lcstore.science import simulate

__all__ = [
    "LagFunction",
    "dcf",
    "zdcf",
    "iccf",
    "peak_and_centroid",
    "lag_uncertainty",
    "lag_significance",
]

#: Pairs generated at a time by the DCF pair builder (memory bound).
_PAIR_CHUNK = 2_000_000
#: Most lag bins a DCF or ICCF grid may have.
_MAX_LAG_BINS = 100_000
#: Most pairs the ZDCF sorts (about 1.3 GB of work arrays at the limit).
_ZDCF_MAX_PAIRS = 60_000_000
#: Lags closer than this fraction of the whole lag range count as equal in
#: the ZDCF binning (the resolution of Alexander's program).
_ZDCF_RESOLUTION = 1e-3
#: The ZDCF keeps |r| below 1 − this so that atanh r stays finite.
_ZDCF_R_EPS = 1e-7
#: Fraction of pairs on each side of the mean lag that defines the ZDCF lag
#: interval (±1σ of a Gaussian: 0.3413 on each side).
_ONE_SIGMA_FRACTION = 0.3413
#: Elements of the (lag × point) matrices the ICCF builds at a time.
_ICCF_CHUNK = 1_000_000


@dataclass(frozen=True, eq=False)
class LagFunction:
    """A cross-correlation coefficient as a function of lag.

    All arrays have one element per lag bin.

    Attributes
    ----------
    lag : numpy.ndarray
        Lag of the bin (time unit of the input, days in lcstore): the bin
        centre for :func:`dcf` and :func:`iccf`, the mean lag of the bin's
        pairs for :func:`zdcf`.  Positive: curve b lags behind curve a.
    coefficient : numpy.ndarray
        Correlation coefficient (dimensionless; NaN where undefined).
    error : numpy.ndarray
        Symmetric 1σ error of the coefficient (for the ZDCF the mean of
        ``error_lo`` and ``error_hi``; NaN for the ICCF, which has none).
    n_pairs : numpy.ndarray of int
        Number of pairs in the bin (ICCF: points used by both halves).
    lag_lo, lag_hi : numpy.ndarray
        Lower and upper lag of the bin: the bin edges for DCF and ICCF,
        ``lag − σ−`` and ``lag + σ+`` (the ±1σ lag interval) for the ZDCF.
    error_lo, error_hi : numpy.ndarray
        Downward and upward errors of the coefficient (both ≥ 0; asymmetric
        for the ZDCF, equal to ``error`` otherwise).
    method : str
        Short description of the estimator and its settings.
    """

    lag: np.ndarray
    coefficient: np.ndarray
    error: np.ndarray
    n_pairs: np.ndarray
    lag_lo: np.ndarray
    lag_hi: np.ndarray
    error_lo: np.ndarray
    error_hi: np.ndarray
    method: str

    def __post_init__(self) -> None:
        n = np.asarray(self.lag).shape
        for name in (
            "lag",
            "coefficient",
            "error",
            "lag_lo",
            "lag_hi",
            "error_lo",
            "error_hi",
        ):
            value = np.asarray(getattr(self, name), dtype=float)
            if value.shape != n or value.ndim != 1:
                raise ValueError(f"LagFunction.{name} must be one-dimensional with {n} elements")
            object.__setattr__(self, name, value)
        counts = np.asarray(self.n_pairs, dtype=np.int64)
        if counts.shape != n:
            raise ValueError(f"LagFunction.n_pairs must have {n} elements")
        object.__setattr__(self, "n_pairs", counts)

    def __len__(self) -> int:
        return int(self.lag.size)


# ----------------------------------------------------------------------------
# input handling


def _curve(
    t: npt.ArrayLike, v: npt.ArrayLike, e: npt.ArrayLike | None, name: str
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    t_ = np.asarray(t, dtype=float)
    v_ = np.asarray(v, dtype=float)
    if t_.ndim != 1 or t_.shape != v_.shape:
        raise ValueError(f"curve {name}: times and values must be one-dimensional and equally long")
    e_ = None
    if e is not None:
        e_ = np.asarray(e, dtype=float)
        if e_.shape != t_.shape:
            raise ValueError(f"curve {name}: errors must have the length of the values")
        if not np.all(np.isfinite(e_)) or np.any(e_ < 0):
            raise ValueError(f"curve {name}: errors must be finite and >= 0")
    if not (np.all(np.isfinite(t_)) and np.all(np.isfinite(v_))):
        raise ValueError(f"curve {name}: times and values must be finite")
    if t_.size < 2:
        raise ValueError(f"curve {name} needs at least 2 points, got {t_.size}")
    return t_, v_, e_


def _lag_grid(lag_min: float, lag_max: float, lag_step: float) -> tuple[np.ndarray, np.ndarray]:
    """Bin centres lag_min + k·lag_step (≤ lag_max) and the K + 1 bin boundaries."""
    if not (np.isfinite(lag_min) and np.isfinite(lag_max) and np.isfinite(lag_step)):
        raise ValueError("lag_min, lag_max and lag_step must be finite")
    if not lag_step > 0:
        raise ValueError(f"lag_step must be positive, got {lag_step}")
    if lag_max < lag_min:
        raise ValueError(f"lag_max ({lag_max}) must not be below lag_min ({lag_min})")
    n_bins = int(np.floor((lag_max - lag_min) / lag_step + 1e-9)) + 1
    if n_bins > _MAX_LAG_BINS:
        raise ValueError(f"the lag grid would have {n_bins} bins (at most {_MAX_LAG_BINS})")
    centres = lag_min + lag_step * np.arange(n_bins)
    bounds = np.append(centres - 0.5 * lag_step, centres[-1] + 0.5 * lag_step)
    return centres, bounds


# ----------------------------------------------------------------------------
# DCF


class _PairWindows:
    """All pairs (i, j) with tb_j − ta_i inside [bounds[0], bounds[-1]), in chunks.

    For each ta_i the window of tb in range is found by binary search in the
    sorted tb, and the pair indices are built with ``np.repeat`` and an
    ``arange`` offset, so the cost scales with the number of pairs in the lag
    range, not with N·M.  Each pair's lag bin k satisfies
    ``bounds[k] <= Δt < bounds[k + 1]``.  One chunk is kept in memory for
    reuse; larger pair sets are regenerated on each pass.
    """

    def __init__(self, ta: np.ndarray, tb: np.ndarray, bounds: np.ndarray, chunk: int) -> None:
        self.ta = ta
        self.bounds = bounds
        self.n_bins = bounds.size - 1
        self.order_b = np.argsort(tb, kind="stable")
        self.tbs = tb[self.order_b]
        scale = float(np.max(np.abs(ta)) + np.max(np.abs(tb)) + np.max(np.abs(bounds)))
        margin = 16 * np.finfo(float).eps * scale
        self.lo = np.searchsorted(self.tbs, ta + bounds[0] - margin, side="left")
        self.hi = np.searchsorted(self.tbs, ta + bounds[-1] + margin, side="right")
        counts = self.hi - self.lo
        self.counts = counts
        csum = np.cumsum(counts)
        self.n_candidates = int(csum[-1]) if csum.size else 0
        # chunk boundaries over the a points: each chunk holds <= chunk pairs
        # (or a single a point with more)
        cuts = [0]
        while cuts[-1] < ta.size:
            base = csum[cuts[-1] - 1] if cuts[-1] > 0 else 0
            nxt = int(np.searchsorted(csum, base + chunk, side="right"))
            cuts.append(max(nxt, cuts[-1] + 1))
        self.cuts = cuts
        self._cache = list(self._generate()) if len(cuts) <= 2 else None

    def _generate(self) -> Iterator[tuple[np.ndarray, np.ndarray, np.ndarray]]:
        for i0, i1 in zip(self.cuts[:-1], self.cuts[1:], strict=True):
            c = self.counts[i0:i1]
            total = int(c.sum())
            if total == 0:
                continue
            ia = np.repeat(np.arange(i0, i1), c)
            starts = np.repeat(self.lo[i0:i1] - (np.cumsum(c) - c), c)
            js = starts + np.arange(total)
            dt = self.tbs[js] - self.ta[ia]
            k = np.searchsorted(self.bounds, dt, side="right") - 1
            ok = (k >= 0) & (k < self.n_bins)
            yield ia[ok], self.order_b[js[ok]], k[ok]

    def chunks(self) -> Iterator[tuple[np.ndarray, np.ndarray, np.ndarray]]:
        if self._cache is not None:
            return iter(self._cache)
        return self._generate()

    def sums(
        self,
        terms: Callable[[np.ndarray, np.ndarray, np.ndarray], tuple[np.ndarray, ...]],
        n_terms: int,
    ) -> np.ndarray:
        """Per-bin sums of ``n_terms`` pair quantities computed by ``terms``."""
        out = np.zeros((n_terms, self.n_bins))
        for ia, jb, k in self.chunks():
            for q, values in enumerate(terms(ia, jb, k)):
                out[q] += np.bincount(k, weights=values, minlength=self.n_bins)
        return out

    def counts_per_bin(self) -> np.ndarray:
        out = np.zeros(self.n_bins, dtype=np.int64)
        for _, _, k in self.chunks():
            out += np.bincount(k, minlength=self.n_bins)
        return out


def _dcf_normalisation(v: np.ndarray, e: np.ndarray | None, name: str) -> float:
    variance = float(np.var(v))
    noise = float(np.mean(e**2)) if e is not None else 0.0
    if not variance - noise > 0:
        raise ValueError(
            f"DCF: curve {name} has variance {variance:.6g} <= mean squared error "
            f"{noise:.6g}; its variability is not above the noise (use local=True or the ZDCF)"
        )
    return variance - noise


def _dcf_on_pairs(
    pairs: _PairWindows,
    a: np.ndarray,
    ea: np.ndarray | None,
    b: np.ndarray,
    eb: np.ndarray | None,
    local: bool,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Coefficient, error and pair count per bin (Edelson & Krolik 1988; Welsh 1999)."""
    m = pairs.counts_per_bin()
    mf = m.astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        if not local:
            norm = np.sqrt(_dcf_normalisation(a, ea, "a") * _dcf_normalisation(b, eb, "b"))
            da = a - a.mean()
            db = b - b.mean()

            def udcf(ia: np.ndarray, jb: np.ndarray, k: np.ndarray) -> np.ndarray:
                return da[ia] * db[jb] / norm

            (s1,) = pairs.sums(lambda ia, jb, k: (udcf(ia, jb, k),), 1)
            coef = np.where(m > 0, s1 / mf, np.nan)
            (s2,) = pairs.sums(lambda ia, jb, k: ((udcf(ia, jb, k) - coef[k]) ** 2,), 1)
        else:
            sa, sb = pairs.sums(lambda ia, jb, k: (a[ia], b[jb]), 2)
            ma, mb = sa / mf, sb / mf
            saa, sbb, sab = pairs.sums(
                lambda ia, jb, k: (
                    (a[ia] - ma[k]) ** 2,
                    (b[jb] - mb[k]) ** 2,
                    (a[ia] - ma[k]) * (b[jb] - mb[k]),
                ),
                3,
            )
            defined = (m >= 2) & (saa > 0) & (sbb > 0)
            coef = np.where(defined, sab / np.sqrt(saa * sbb), np.nan)
            sig = np.sqrt(saa * sbb) / mf  # σ_a σ_b of the bin (ddof = 0)
            (s2,) = pairs.sums(
                lambda ia, jb, k: (((a[ia] - ma[k]) * (b[jb] - mb[k]) / sig[k] - coef[k]) ** 2,),
                1,
            )
        err = np.where(m >= 2, np.sqrt(s2) / (mf - 1.0), np.nan)
    return coef, err, m


def dcf(
    ta: npt.ArrayLike,
    a: npt.ArrayLike,
    ea: npt.ArrayLike | None,
    tb: npt.ArrayLike,
    b: npt.ArrayLike,
    eb: npt.ArrayLike | None,
    *,
    lag_min: float,
    lag_max: float,
    lag_step: float,
    local: bool = False,
) -> LagFunction:
    """Discrete correlation function of two unevenly sampled curves.

    Edelson & Krolik (1988, ApJ 333, 646; equation numbers 2–4 from memory):
    every pair (i, j) gives
    the unbinned value

        UDCF_ij = (a_i − ā)(b_j − b̄) / √((σ_a² − ⟨e_a²⟩)(σ_b² − ⟨e_b²⟩)),

    with the means, variances (ddof = 0) and mean squared measurement errors
    of the whole curves.  The lag bins are centred on ``lag_min + k·lag_step``
    (k = 0, 1, … while the centre is ≤ ``lag_max``) with width ``lag_step``;
    pair (i, j) with Δt_ij = tb_j − ta_i falls in the bin with
    τ − Δτ/2 ≤ Δt_ij < τ + Δτ/2.  Over the M pairs of a bin,
    DCF(τ) = mean UDCF and its error is √(Σ (UDCF − DCF)²) / (M − 1).  DCF
    values are not clipped to [−1, 1] (the error-corrected normalisation can
    push them beyond).  With ``local=True`` the normalisation is that of the
    local cross-correlation function (Welsh 1999, PASP 111, 1347): the
    means and standard deviations (ddof = 0) of the pairs inside each bin,
    without error correction, so the coefficient is the Pearson r of the
    bin's pairs.  With identical time stamps and no errors, DCF(0) equals
    the Pearson r of the two curves.

    Only the pairs inside the lag range are formed (sorted times and binary
    search), so the cost scales with their number rather than with N·M.

    Parameters
    ----------
    ta, a, ea : array_like
        Times (days), fluxes and 1σ flux errors of curve a (x).  ``ea`` may
        be None (no error correction).
    tb, b, eb : array_like
        The same for curve b (y), which lags a at positive lag.
    lag_min, lag_max, lag_step : float
        Lag grid (days).
    local : bool
        Use the local normalisation of Welsh (1999).

    Returns
    -------
    LagFunction
        Bins with no pair have NaN coefficient; bins with one pair NaN error.

    Raises
    ------
    ValueError
        For invalid input, or (``local=False``) when a curve's variance does
        not exceed its mean squared error, which leaves the normalisation
        undefined.
    """
    ta_, a_, ea_ = _curve(ta, a, ea, "a")
    tb_, b_, eb_ = _curve(tb, b, eb, "b")
    centres, bounds = _lag_grid(lag_min, lag_max, lag_step)
    if not local:
        _dcf_normalisation(a_, ea_, "a")
        _dcf_normalisation(b_, eb_, "b")
    pairs = _PairWindows(ta_, tb_, bounds, _PAIR_CHUNK)
    coef, err, m = _dcf_on_pairs(pairs, a_, ea_, b_, eb_, local)
    name = "local DCF (Welsh 1999)" if local else "DCF (Edelson & Krolik 1988)"
    return LagFunction(
        lag=centres,
        coefficient=coef,
        error=err,
        n_pairs=m,
        lag_lo=bounds[:-1],
        lag_hi=bounds[1:],
        error_lo=err,
        error_hi=err,
        method=f"{name}; lag bins of width {lag_step:g} centred on {lag_min:g} + k*{lag_step:g}",
    )


# ----------------------------------------------------------------------------
# ZDCF


def _average_same_times(
    t: np.ndarray, v: np.ndarray, e: np.ndarray | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """Sort by time and average the points that share a time stamp."""
    tu, inverse, counts = np.unique(t, return_inverse=True, return_counts=True)
    vu = np.bincount(inverse, weights=v, minlength=tu.size) / counts
    eu = None if e is None else np.bincount(inverse, weights=e, minlength=tu.size) / counts
    return tu, vu, eu


@dataclass(frozen=True, eq=False)
class _ZdcfBins:
    """The ZDCF lag binning, which depends on the sampling times only."""

    pair_a: np.ndarray  # index into the (time-averaged) curve a of each binned pair
    pair_b: np.ndarray
    pair_bin: np.ndarray  # bin of each binned pair
    lag: np.ndarray
    sig_lo: np.ndarray
    sig_hi: np.ndarray
    n_pairs: np.ndarray


_UNSET = np.iinfo(np.int64).max


def _greedy_first_use(
    pa: np.ndarray, pb: np.ndarray, scratch: tuple[np.ndarray, ...]
) -> np.ndarray:
    """Which pairs a sequential scan accepts when no point may be used twice.

    Pair k is accepted when neither its a point nor its b point belongs to an
    accepted pair earlier in the sequence.  Computed in rounds, each
    vectorised: an undecided pair is accepted when it is the first undecided
    pair of both its points (all earlier pairs sharing a point were
    rejected), and rejected when an earlier accepted pair shares a point.
    Every round settles at least the first undecided pair, and on lag-ordered
    pairs only a few rounds are needed.  ``scratch`` holds four int64 arrays
    (first and accepting pair per a point and per b point) filled with
    ``_UNSET``; they are left that way on return.
    """
    first_a, first_b, used_a, used_b = scratch
    accepted = np.zeros(pa.size, dtype=bool)
    live = np.arange(pa.size)
    while live.size:
        la, lb = pa[live], pb[live]
        np.minimum.at(first_a, la, live)
        np.minimum.at(first_b, lb, live)
        take = (first_a[la] == live) & (first_b[lb] == live)
        first_a[la] = _UNSET
        first_b[lb] = _UNSET
        new = live[take]
        accepted[new] = True
        used_a[pa[new]] = new
        used_b[pb[new]] = new
        rest = live[~take]
        blocked = (used_a[pa[rest]] < rest) | (used_b[pb[rest]] < rest)
        live = rest[~blocked]
    used_a[pa[accepted]] = _UNSET
    used_b[pb[accepted]] = _UNSET
    return accepted


def _zdcf_scan(
    lag: np.ndarray,
    pa: np.ndarray,
    pb: np.ndarray,
    na: int,
    nb: int,
    min_pairs: int,
    tolerance: float,
) -> list[tuple[np.ndarray, int, int, bool]]:
    """Fill bins along pairs given in scan order (one direction of the lag axis).

    The pairs are processed in chunks: pairs sharing a point with a pair
    already accepted into the bin are rejected, the rest go through
    :func:`_greedy_first_use`, and the bin is closed at the first pair, once
    ``min_pairs`` are accepted, whose lag differs from the last accepted lag
    by more than ``tolerance``.  The scan stops at the last pair without
    adding it.  Returns, per bin, the accepted scan positions, the first and
    the one-past-last scanned position, and whether the end of the lag axis
    closed the bin.
    """
    bins: list[tuple[np.ndarray, int, int, bool]] = []
    last = lag.size - 1
    used_a = np.zeros(na, dtype=bool)
    used_b = np.zeros(nb, dtype=bool)
    scratch = (
        np.full(na, _UNSET),
        np.full(nb, _UNSET),
        np.full(na, _UNSET),
        np.full(nb, _UNSET),
    )
    guess = 4 * min_pairs
    start = 0
    while start < last:
        parts: list[np.ndarray] = []
        n_acc = 0
        last_lag = lag[start]
        pos = start
        chunk = guess
        while True:
            stop = min(pos + chunk, last)
            sa, sb = pa[pos:stop], pb[pos:stop]
            free = np.flatnonzero(~(used_a[sa] | used_b[sb]))
            acc = np.zeros(stop - pos, dtype=bool)
            acc[free[_greedy_first_use(sa[free], sb[free], scratch)]] = True
            n_before = n_acc + np.cumsum(acc) - acc
            last_acc = np.maximum.accumulate(np.where(acc, np.arange(acc.size), -1))
            prev = np.concatenate(([-1], last_acc[:-1]))
            prev_lag = np.where(prev >= 0, lag[pos + np.maximum(prev, 0)], last_lag)
            full = (n_before >= min_pairs) & (np.abs(lag[pos:stop] - prev_lag) > tolerance)
            hit = np.flatnonzero(full)
            if hit.size:
                close = pos + int(hit[0])
                parts.append(pos + np.flatnonzero(acc[: hit[0]]))
                at_end = False
                break
            taken = np.flatnonzero(acc)
            parts.append(pos + taken)
            if taken.size:
                n_acc += taken.size
                last_lag = lag[pos + taken[-1]]
                used_a[sa[taken]] = True
                used_b[sb[taken]] = True
            if stop == last:
                close = last
                at_end = True
                break
            pos = stop
            chunk *= 2
        members = np.concatenate(parts)
        used_a[pa[members]] = False
        used_b[pb[members]] = False
        if members.size <= 1:
            break
        bins.append((members, start, close, at_end))
        guess = max(4 * min_pairs, (close - start) // 4)
        start = close
    return bins


def _stable_argsort(x: np.ndarray) -> np.ndarray:
    """``np.argsort(x, kind="stable")``, computed as a quicksort plus a fix-up of ties.

    On millions of pair lags this is about twice as fast as numpy's stable
    sort; equal values come out in the order of their indices.
    """
    order = np.argsort(x)
    xs = x[order]
    tie = xs[1:] == xs[:-1]
    if tie.any():
        in_group = np.zeros(x.size, dtype=bool)
        in_group[1:] |= tie
        in_group[:-1] |= tie
        sub = np.flatnonzero(in_group)
        group = np.cumsum(~np.concatenate(([False], tie)))[sub]
        order[sub] = order[sub][np.lexsort((order[sub], group))]
    return order


def _zdcf_binning(
    ta: np.ndarray,
    tb: np.ndarray,
    *,
    min_pairs: int,
    lag_min: float | None,
    lag_max: float | None,
    omit_zero_lags: bool,
) -> _ZdcfBins:
    na, nb = ta.size, tb.size
    lo = -np.inf if lag_min is None else float(lag_min)
    hi = np.inf if lag_max is None else float(lag_max)
    if lo > hi:
        raise ValueError(f"lag_max ({lag_max}) must not be below lag_min ({lag_min})")
    if lag_min is None and lag_max is None:
        total = na * nb
        if total > _ZDCF_MAX_PAIRS:
            raise ValueError(
                f"ZDCF: {total} pairs exceed the limit of {_ZDCF_MAX_PAIRS}; "
                "give lag_min/lag_max or bin the curves first"
            )
        dt = (tb[None, :] - ta[:, None]).ravel()
        pa = np.repeat(np.arange(na, dtype=np.int32), nb)
        pb = np.tile(np.arange(nb, dtype=np.int32), na)
        keep = None
    else:
        # pairs with lo <= tb_j - ta_i <= hi, a-major and b ascending (tb is
        # sorted); one extra candidate each side, filtered exactly below
        j_lo = np.searchsorted(tb, ta + lo, side="left") if np.isfinite(lo) else np.zeros(na, int)
        j_hi = np.searchsorted(tb, ta + hi, side="right") if np.isfinite(hi) else np.full(na, nb)
        j_lo = np.maximum(j_lo - 1, 0)
        j_hi = np.minimum(j_hi + 1, nb)
        counts = np.maximum(j_hi - j_lo, 0)
        total = int(counts.sum())
        if total > _ZDCF_MAX_PAIRS:
            raise ValueError(
                f"ZDCF: {total} pairs exceed the limit of {_ZDCF_MAX_PAIRS}; "
                "narrow lag_min/lag_max or bin the curves first"
            )
        pa = np.repeat(np.arange(na, dtype=np.int32), counts)
        offsets = np.repeat(j_lo - (np.cumsum(counts) - counts), counts)
        pb = (offsets + np.arange(total)).astype(np.int32)
        dt = tb[pb] - ta[pa]
        keep = (dt >= lo) & (dt <= hi)
    if omit_zero_lags:
        keep = dt != 0 if keep is None else keep & (dt != 0)
    if keep is not None:
        pa, pb, dt = pa[keep], pb[keep], dt[keep]
    npp = dt.size
    if npp < 2:
        raise ValueError(f"ZDCF: only {npp} pairs in the lag range")
    order = _stable_argsort(dt)
    lag, pa, pb = dt[order], pa[order], pb[order]
    tolerance = (lag[-1] - lag[0]) * _ZDCF_RESOLUTION
    # Alexander (1997): bins are filled from the median lag outwards, first
    # towards negative lags, then towards positive lags.
    mid = npp // 2
    down = _zdcf_scan(
        lag[mid - 1 :: -1] if mid > 0 else lag[:0],
        pa[mid - 1 :: -1] if mid > 0 else pa[:0],
        pb[mid - 1 :: -1] if mid > 0 else pb[:0],
        na,
        nb,
        min_pairs,
        tolerance,
    )
    up = _zdcf_scan(lag[mid:], pa[mid:], pb[mid:], na, nb, min_pairs, tolerance)
    # scan positions -> positions in the lag-sorted pair list, and the range
    # [plo, phi] of sorted positions scanned into each bin
    bins = [(mid - 1 - m, mid - c, mid - 1 - s, e) for m, s, c, e in down[::-1]]
    bins += [(mid + m, mid + s, mid + c - 1, e) for m, s, c, e in up]
    bins = [b for b in bins if not (b[3] and b[0].size < min_pairs)]
    if not bins:
        raise ValueError(f"ZDCF: no lag bin reached {min_pairs} pairs")
    sizes = np.array([b[0].size for b in bins])
    members = np.concatenate([b[0] for b in bins])
    bin_id = np.repeat(np.arange(len(bins)), sizes)
    mean_lag = np.bincount(bin_id, weights=lag[members]) / sizes
    plo = np.array([b[1] for b in bins])
    phi = np.array([b[2] for b in bins])
    # position of the first scanned pair whose lag is >= the bin's mean lag
    centre = np.minimum(np.searchsorted(lag, mean_lag, side="left"), phi)
    centre = np.maximum(centre, plo)
    down_pos = np.maximum(centre - np.rint((centre - plo) * _ONE_SIGMA_FRACTION * 2), plo)
    up_pos = np.minimum(centre + np.rint((phi - centre) * _ONE_SIGMA_FRACTION * 2), phi)
    sig_lo = np.maximum(mean_lag - lag[down_pos.astype(np.int64)], 0.0)
    sig_hi = np.maximum(lag[up_pos.astype(np.int64)] - mean_lag, 0.0)
    return _ZdcfBins(
        pair_a=pa[members],
        pair_b=pb[members],
        pair_bin=bin_id,
        lag=mean_lag,
        sig_lo=sig_lo,
        sig_hi=sig_hi,
        n_pairs=sizes,
    )


def _fisher_z_moments(r: np.ndarray, n: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Expectation and standard deviation of Fisher's z for small samples.

    Alexander (1997), from the series of Kendall & Stuart (The
    Advanced Theory of Statistics, vol. 1): with ρ estimated by r and
    m = n − 1, E(z) = atanh r + r/(2m)·[1 + (5 + r²)/(4m) + (11 + 2r² + 3r⁴)/(8m²)]
    and s²(z) = (1/m)·[1 + (4 − r²)/(2m) + (22 − 6r² − 3r⁴)/(6m²)].
    """
    m = n - 1.0
    expect = np.arctanh(r) + r / (2 * m) * (
        1 + (5 + r**2) / (4 * m) + (11 + 2 * r**2 + 3 * r**4) / (8 * m**2)
    )
    var = (1 + (4 - r**2) / (2 * m) + (22 - 6 * r**2 - 3 * r**4) / (6 * m**2)) / m
    return expect, np.sqrt(np.maximum(var, 0.0))


def _zdcf_on_bins(
    bins: _ZdcfBins, a: np.ndarray, b: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-bin Pearson r (clipped inside ±1) and its asymmetric 1σ errors."""
    k, n = bins.pair_bin, bins.n_pairs.astype(float)
    x, y = a[bins.pair_a], b[bins.pair_b]
    mx = np.bincount(k, weights=x) / n
    my = np.bincount(k, weights=y) / n
    dx, dy = x - mx[k], y - my[k]
    sxx = np.bincount(k, weights=dx * dx)
    syy = np.bincount(k, weights=dy * dy)
    sxy = np.bincount(k, weights=dx * dy)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.where((sxx > 0) & (syy > 0), sxy / np.sqrt(sxx * syy), np.nan)
    r = np.clip(r, -1 + _ZDCF_R_EPS, 1 - _ZDCF_R_EPS)
    expect, sigma = _fisher_z_moments(r, n)
    return r, r - np.tanh(expect - sigma), np.tanh(expect + sigma) - r


def zdcf(
    ta: npt.ArrayLike,
    a: npt.ArrayLike,
    ea: npt.ArrayLike | None,
    tb: npt.ArrayLike,
    b: npt.ArrayLike,
    eb: npt.ArrayLike | None,
    *,
    min_pairs: int = 11,
    lag_min: float | None = None,
    lag_max: float | None = None,
    omit_zero_lags: bool = True,
) -> LagFunction:
    """Z-transformed discrete correlation function (Alexander 1997).

    Alexander (1997, in Astronomical Time Series, ASSL 218, 163, section 2):

    1. Points with identical times are averaged.  All pairs (i, j) are
       formed (only those with ``lag_min <= Δt <= lag_max`` when a limit is
       given; pairs with Δt = 0 are left out when ``omit_zero_lags``) and
       ordered by Δt = tb_j − ta_i.
    2. Starting at the median pair, the ordered list is cut into bins of
       ``min_pairs`` pairs, first downwards to the most negative lag, then
       upwards from the median to the most positive lag.  A pair whose a or
       b point is already used in the bin is skipped (so the pairs of a bin
       are independent), and pairs whose lags differ by less than 0.001 of
       the whole lag range from the last accepted one are never split
       between bins, so a bin may hold a few more than ``min_pairs`` pairs.
       The last bin at each end of the lag axis, which usually falls short
       of ``min_pairs``, is dropped (the pair of the most extreme lag at each
       end closes the scan without being binned).
    3. In each bin the Pearson r of the pairs is computed (kept within
       ±(1 − 1e-7)), and its ±1σ errors follow from Fisher's
       z = atanh r with the small-sample expectation and dispersion
       (Alexander 1997; :func:`_fisher_z_moments`):
       ``error_lo = r − tanh(E(z) − s(z))``, ``error_hi = tanh(E(z) + s(z)) − r``.
    4. The bin's lag is the mean lag of its pairs; its interval runs to the
       lags of the pairs 34.13 % of the scanned pairs below and above the
       mean (``lag_lo``, ``lag_hi``).

    The binning depends only on the times and is the costly step; it is
    vectorised per bin (see :func:`_greedy_first_use`).  The measurement
    errors do not enter the coefficients (Alexander propagates them by
    Monte Carlo; use :func:`lag_uncertainty` for that); they are accepted
    for a uniform call signature.

    Parameters
    ----------
    ta, a, ea : array_like
        Times (days), fluxes and errors (or None) of curve a.
    tb, b, eb : array_like
        The same for curve b (lags a at positive lag).
    min_pairs : int
        Least number of pairs per bin (Alexander recommends 11).
    lag_min, lag_max : float, optional
        Restrict the pairs to this lag range before binning (the binning
        then starts at the median lag of the pairs in range).
    omit_zero_lags : bool
        Leave out pairs with zero time difference.

    Returns
    -------
    LagFunction
        One row per bin in increasing lag; ``error`` is the mean of
        ``error_lo`` and ``error_hi``.
    """
    if min_pairs < 2:
        raise ValueError(f"min_pairs must be >= 2, got {min_pairs}")
    ta_, a_, ea_ = _curve(ta, a, ea, "a")
    tb_, b_, eb_ = _curve(tb, b, eb, "b")
    ta_, a_, _ = _average_same_times(ta_, a_, ea_)
    tb_, b_, _ = _average_same_times(tb_, b_, eb_)
    bins = _zdcf_binning(
        ta_,
        tb_,
        min_pairs=int(min_pairs),
        lag_min=lag_min,
        lag_max=lag_max,
        omit_zero_lags=omit_zero_lags,
    )
    return _zdcf_result(bins, a_, b_, int(min_pairs), omit_zero_lags)


def _zdcf_result(
    bins: _ZdcfBins, a: np.ndarray, b: np.ndarray, min_pairs: int, omit_zero_lags: bool
) -> LagFunction:
    r, err_lo, err_hi = _zdcf_on_bins(bins, a, b)
    zero = "zero lags omitted" if omit_zero_lags else "zero lags kept"
    return LagFunction(
        lag=bins.lag,
        coefficient=r,
        error=0.5 * (err_lo + err_hi),
        n_pairs=bins.n_pairs,
        lag_lo=bins.lag - bins.sig_lo,
        lag_hi=bins.lag + bins.sig_hi,
        error_lo=err_lo,
        error_hi=err_hi,
        method=f"ZDCF (Alexander 1997); at least {min_pairs} pairs per bin, {zero}",
    )


# ----------------------------------------------------------------------------
# ICCF


def _masked_pearson(
    x: np.ndarray, y: np.ndarray, mask: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Row-wise Pearson r of x and y over ``mask`` (2-D arrays), and the counts."""
    n = mask.sum(axis=1)
    nf = n.astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        mx = np.where(mask, x, 0.0).sum(axis=1) / nf
        my = np.where(mask, y, 0.0).sum(axis=1) / nf
        dx = np.where(mask, x - mx[:, None], 0.0)
        dy = np.where(mask, y - my[:, None], 0.0)
        sxx = np.einsum("ij,ij->i", dx, dx)
        syy = np.einsum("ij,ij->i", dy, dy)
        sxy = np.einsum("ij,ij->i", dx, dy)
        r = np.where((n >= 2) & (sxx > 0) & (syy > 0), sxy / np.sqrt(sxx * syy), np.nan)
    return r, n


def _iccf_half(
    t_fixed: np.ndarray,
    v_fixed: np.ndarray,
    t_interp: np.ndarray,
    v_interp: np.ndarray,
    shifts: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """r between v_fixed and v_interp interpolated at t_fixed + shift, per shift."""
    r = np.empty(shifts.size)
    n = np.empty(shifts.size, dtype=np.int64)
    rows = max(1, _ICCF_CHUNK // t_fixed.size)
    for s0 in range(0, shifts.size, rows):
        q = t_fixed[None, :] + shifts[s0 : s0 + rows, None]
        mask = (q >= t_interp[0]) & (q <= t_interp[-1])
        vi = np.interp(q, t_interp, v_interp)
        vf = np.broadcast_to(v_fixed, q.shape)
        r[s0 : s0 + rows], n[s0 : s0 + rows] = _masked_pearson(vf, vi, mask)
    return r, n


def iccf(
    ta: npt.ArrayLike,
    a: npt.ArrayLike,
    tb: npt.ArrayLike,
    b: npt.ArrayLike,
    *,
    lag_min: float,
    lag_max: float,
    lag_step: float,
) -> LagFunction:
    """Interpolated cross-correlation function (Gaskell & Peterson 1987).

    Gaskell & Peterson (1987, ApJS 65, 1): at each lag τ of the
    grid ``lag_min + k·lag_step`` (≤ ``lag_max``), curve b is linearly
    interpolated at ta_i + τ and correlated (Pearson r) with a_i, using only
    the a points whose shifted time falls inside b's time range (r₁); then
    curve a is interpolated at tb_j − τ and correlated with b_j (r₂).  The
    coefficient is (r₁ + r₂)/2; where only one half is defined (fewer than 2
    overlapping points or no variance) that half alone is used.  ``n_pairs``
    is the number of points used by both halves together.  The ICCF has no
    per-lag error (``error`` is NaN): use :func:`lag_uncertainty`.  With
    identical sampling, the value at zero lag is the Pearson r of the curves.

    Parameters
    ----------
    ta, a : array_like
        Times (days) and fluxes of curve a.
    tb, b : array_like
        Times and fluxes of curve b (lags a at positive lag).
    lag_min, lag_max, lag_step : float
        Lag grid (days); ``lag_lo``/``lag_hi`` of the result are the bin
        edges τ ± Δτ/2.

    Returns
    -------
    LagFunction
    """
    ta_, a_, _ = _curve(ta, a, None, "a")
    tb_, b_, _ = _curve(tb, b, None, "b")
    oa, ob = np.argsort(ta_, kind="stable"), np.argsort(tb_, kind="stable")
    ta_, a_, tb_, b_ = ta_[oa], a_[oa], tb_[ob], b_[ob]
    centres, bounds = _lag_grid(lag_min, lag_max, lag_step)
    r1, n1 = _iccf_half(ta_, a_, tb_, b_, centres)
    r2, n2 = _iccf_half(tb_, b_, ta_, a_, -centres)
    ok1, ok2 = np.isfinite(r1), np.isfinite(r2)
    coef = np.where(ok1 & ok2, 0.5 * (r1 + r2), np.where(ok1, r1, r2))
    nan = np.full(centres.size, np.nan)
    return LagFunction(
        lag=centres,
        coefficient=coef,
        error=nan,
        n_pairs=n1 + n2,
        lag_lo=bounds[:-1],
        lag_hi=bounds[1:],
        error_lo=nan,
        error_hi=nan,
        method=(
            "ICCF (Gaskell & Peterson 1987), linear interpolation both ways, "
            f"lag grid {lag_min:g} + k*{lag_step:g}"
        ),
    )


# ----------------------------------------------------------------------------
# peak, centroid, uncertainties, significance


def peak_and_centroid(lf: LagFunction, *, threshold: float = 0.8) -> tuple[float, float]:
    """Peak lag and centroid lag of a lag function.

    The peak is the lag of the largest finite coefficient r_max.  The
    centroid is Σ τ r / Σ r over the contiguous run of bins around the peak
    whose coefficient is ≥ ``threshold``·r_max (Peterson et al. 1998, PASP
    110, 660, with threshold 0.8); a bin with an undefined
    coefficient ends the run.

    Parameters
    ----------
    lf : LagFunction
        The lag function.
    threshold : float
        Fraction of the peak defining the centroid region (0 < threshold ≤ 1).

    Returns
    -------
    peak_lag, centroid_lag : float
        In the lag unit of ``lf`` (days).

    Raises
    ------
    ValueError
        If no coefficient is finite or the peak is not positive.
    """
    if not 0 < threshold <= 1:
        raise ValueError(f"threshold must be in (0, 1], got {threshold}")
    coef = lf.coefficient
    finite = np.isfinite(coef)
    if not finite.any():
        raise ValueError("the lag function has no finite coefficient")
    i_peak = int(np.argmax(np.where(finite, coef, -np.inf)))
    r_max = float(coef[i_peak])
    if not r_max > 0:
        raise ValueError(f"the lag function has no positive peak (maximum {r_max:.4g})")
    inside = finite & (np.where(finite, coef, -np.inf) >= threshold * r_max)
    outside = np.flatnonzero(~inside)
    left = outside[outside < i_peak]
    right = outside[outside > i_peak]
    i0 = int(left[-1]) + 1 if left.size else 0
    i1 = int(right[0]) if right.size else coef.size
    r = coef[i0:i1]
    centroid = float(np.sum(lf.lag[i0:i1] * r) / np.sum(r))
    return float(lf.lag[i_peak]), centroid


_METHODS = ("dcf", "zdcf", "iccf")


def _lag_function(
    method: str,
    ta: np.ndarray,
    a: np.ndarray,
    ea: np.ndarray | None,
    tb: np.ndarray,
    b: np.ndarray,
    eb: np.ndarray | None,
    params: dict[str, Any],
) -> LagFunction:
    if method == "dcf":
        return dcf(ta, a, ea, tb, b, eb, **params)
    if method == "zdcf":
        return zdcf(ta, a, ea, tb, b, eb, **params)
    if method == "iccf":
        return iccf(ta, a, tb, b, **params)
    raise ValueError(f"unknown lag method {method!r}; expected one of {', '.join(_METHODS)}")


def _resample(
    t: np.ndarray, v: np.ndarray, e: np.ndarray | None, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """One random-subset-selection and flux-randomisation realisation of a curve."""
    picks = rng.integers(0, t.size, size=t.size)
    chosen, times_drawn = np.unique(picks, return_counts=True)
    t_new, v_new = t[chosen], v[chosen].copy()
    e_new = None
    if e is not None:
        e_new = e[chosen] / np.sqrt(times_drawn)
        v_new += e_new * rng.standard_normal(chosen.size)
    return t_new, v_new, e_new


def _percentiles(values: np.ndarray) -> tuple[float, float, float]:
    if values.size == 0:
        return float("nan"), float("nan"), float("nan")
    p16, p50, p84 = np.percentile(values, [16.0, 50.0, 84.0])
    return float(p50), float(p16), float(p84)


def lag_uncertainty(
    ta: npt.ArrayLike,
    a: npt.ArrayLike,
    ea: npt.ArrayLike | None,
    tb: npt.ArrayLike,
    b: npt.ArrayLike,
    eb: npt.ArrayLike | None,
    *,
    method: str,
    n_sim: int,
    rng: np.random.Generator,
    **method_params: Any,
) -> dict[str, Any]:
    """Distribution of the peak and centroid lags by FR/RSS.

    Peterson et al. (1998, PASP 110, 660): each realisation
    draws, for each curve, N points with replacement out of its N points
    (random subset selection), keeps every drawn point once — with its error
    divided by √n when it was drawn n times (the refinement of Peterson et
    al. 2004, ApJ 613, 682, recalled from memory) — and adds to each flux a
    Gaussian deviate of that error (flux randomisation; skipped for a curve
    given without errors).  The lag function of the realisation is computed
    with ``method`` and its peak and centroid lags are recorded
    (:func:`peak_and_centroid`).  Realisations in which the lag function or
    its peak is undefined are counted in ``n_failed``.

    Parameters
    ----------
    ta, a, ea, tb, b, eb : array_like
        The two curves (times in days; errors may be None).
    method : {"dcf", "zdcf", "iccf"}
        Lag estimator.
    n_sim : int
        Number of realisations (≥ 1).
    rng : numpy.random.Generator
        Source of randomness.
    **method_params
        Keyword arguments of the estimator (for example ``lag_min``,
        ``lag_max``, ``lag_step``), plus ``threshold`` for the centroid
        (default 0.8).

    Returns
    -------
    dict
        ``method``, ``n_sim``, ``n_failed``, ``peak_lags`` and
        ``centroid_lags`` (arrays of the successful realisations), and
        ``peak_median``, ``peak_p16``, ``peak_p84``, ``centroid_median``,
        ``centroid_p16``, ``centroid_p84`` (the 68 % interval is
        [p16, p84]; NaN when every realisation failed).
    """
    if method not in _METHODS:
        raise ValueError(f"unknown lag method {method!r}; expected one of {', '.join(_METHODS)}")
    if n_sim < 1:
        raise ValueError(f"n_sim must be >= 1, got {n_sim}")
    params = dict(method_params)
    threshold = float(params.pop("threshold", 0.8))
    ta_, a_, ea_ = _curve(ta, a, ea, "a")
    tb_, b_, eb_ = _curve(tb, b, eb, "b")
    peaks: list[float] = []
    centroids: list[float] = []
    failed = 0
    for _ in range(int(n_sim)):
        sa = _resample(ta_, a_, ea_, rng)
        sb = _resample(tb_, b_, eb_, rng)
        try:
            lf = _lag_function(method, *sa, *sb, params)
            peak, centroid = peak_and_centroid(lf, threshold=threshold)
        except ValueError:
            failed += 1
            continue
        peaks.append(peak)
        centroids.append(centroid)
    peak_arr, cent_arr = np.array(peaks), np.array(centroids)
    pm, p16, p84 = _percentiles(peak_arr)
    cm, c16, c84 = _percentiles(cent_arr)
    return {
        "method": method,
        "n_sim": int(n_sim),
        "n_failed": failed,
        "peak_lags": peak_arr,
        "centroid_lags": cent_arr,
        "peak_median": pm,
        "peak_p16": p16,
        "peak_p84": p84,
        "centroid_median": cm,
        "centroid_p16": c16,
        "centroid_p84": c84,
    }


def _signal_scale(v: np.ndarray, e: np.ndarray | None) -> tuple[float, float]:
    """Standard deviation of the intrinsic variability and of the noise."""
    total = float(np.var(v))
    noise = float(np.mean(e**2)) if e is not None else 0.0
    if total > noise > 0:
        return float(np.sqrt(total - noise)), float(np.sqrt(noise))
    return float(np.sqrt(total)), 0.0


def lag_significance(
    ta: npt.ArrayLike,
    a: npt.ArrayLike,
    ea: npt.ArrayLike | None,
    tb: npt.ArrayLike,
    b: npt.ArrayLike,
    eb: npt.ArrayLike | None,
    *,
    method: str,
    n_sim: int,
    rng: np.random.Generator,
    psd_slope: float | None = None,
    **method_params: Any,
) -> dict[str, Any]:
    """Levels of the lag function reached by chance with uncorrelated red noise.

    Each of ``n_sim`` simulations replaces curve a by red noise of power
    spectrum P(f) ∝ f^-β (Timmer & König 1995, :func:`.simulate.red_noise_at`)
    sampled at the observed times ``ta``, with the observed mean and the
    observed intrinsic variance (variance minus mean squared error), plus
    Gaussian noise of the observed errors ``ea``.  Curve b is kept as
    observed, so the simulated pairs are uncorrelated by construction and
    carry the observed sampling of both curves.  For every lag bin the 95th
    and 99th percentiles of |coefficient| over the simulations are the 95 %
    and 99 % significance levels (per lag, not corrected for the number of
    lags searched).  Simulations for which the lag function is undefined
    (for example a DCF normalisation ≤ 0) are counted in ``n_failed``.

    β is ``psd_slope`` when given, otherwise estimated from curve a with
    :func:`.simulate.psd_slope` (periodogram after interpolation to a regular
    grid); if that fails or gives a value outside [0, 4], β = 2 (random walk)
    is used.

    Parameters
    ----------
    ta, a, ea, tb, b, eb : array_like
        The two curves (times in days; errors may be None).
    method : {"dcf", "zdcf", "iccf"}
        Lag estimator.
    n_sim : int
        Number of simulations (≥ 1).
    rng : numpy.random.Generator
        Source of randomness.
    psd_slope : float, optional
        Power-spectrum index β of curve a.
    **method_params
        Keyword arguments of the estimator.

    Returns
    -------
    dict
        ``method``, ``lag``, ``coefficient`` (observed), ``level_95``,
        ``level_99`` (arrays, one per lag bin), ``psd_slope`` (β used),
        ``psd_slope_source`` (``"given"``, ``"estimated"`` or
        ``"default"``), ``n_sim`` and ``n_failed``.
    """
    if method not in _METHODS:
        raise ValueError(f"unknown lag method {method!r}; expected one of {', '.join(_METHODS)}")
    if n_sim < 1:
        raise ValueError(f"n_sim must be >= 1, got {n_sim}")
    ta_, a_, ea_ = _curve(ta, a, ea, "a")
    tb_, b_, eb_ = _curve(tb, b, eb, "b")
    params = dict(method_params)
    if psd_slope is not None:
        beta, source = float(psd_slope), "given"
    else:
        try:
            beta, _ = simulate.psd_slope(ta_, a_)
            source = "estimated"
        except ValueError:
            beta = float("nan")
        if not (np.isfinite(beta) and 0.0 <= beta <= 4.0):
            beta, source = 2.0, "default"

    observed: LagFunction
    evaluate: Callable[[np.ndarray, np.ndarray | None], np.ndarray]
    t_sim = ta_
    e_sim = ea_
    if method == "dcf":
        observed = dcf(ta_, a_, ea_, tb_, b_, eb_, **params)
        local = bool(params.get("local", False))
        _, bounds = _lag_grid(params["lag_min"], params["lag_max"], params["lag_step"])
        pairs = _PairWindows(ta_, tb_, bounds, _PAIR_CHUNK)

        def evaluate(x: np.ndarray, ex: np.ndarray | None) -> np.ndarray:
            return _dcf_on_pairs(pairs, x, ex, b_, eb_, local)[0]

    elif method == "zdcf":
        observed = zdcf(ta_, a_, ea_, tb_, b_, eb_, **params)
        t_sim, _, e_sim = _average_same_times(ta_, a_, ea_)
        tbu, bu, _ = _average_same_times(tb_, b_, eb_)
        zbins = _zdcf_binning(
            t_sim,
            tbu,
            min_pairs=int(params.get("min_pairs", 11)),
            lag_min=params.get("lag_min"),
            lag_max=params.get("lag_max"),
            omit_zero_lags=bool(params.get("omit_zero_lags", True)),
        )

        def evaluate(x: np.ndarray, ex: np.ndarray | None) -> np.ndarray:
            return _zdcf_on_bins(zbins, x, bu)[0]

    else:
        observed = iccf(ta_, a_, tb_, b_, **params)

        def evaluate(x: np.ndarray, ex: np.ndarray | None) -> np.ndarray:
            return iccf(ta_, x, tb_, b_, **params).coefficient

    signal_std, noise_std = _signal_scale(a_, ea_)
    mean = float(np.mean(a_))
    sims: list[np.ndarray] = []
    failed = 0
    for _ in range(int(n_sim)):
        x = simulate.red_noise_at(t_sim, beta, rng=rng, mean=mean, std=signal_std)
        if e_sim is not None and noise_std > 0:
            x = x + e_sim * rng.standard_normal(x.size)
        try:
            sims.append(np.abs(evaluate(x, e_sim)))
        except ValueError:
            failed += 1
    if sims:
        stack = np.vstack(sims)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN lag bins
            level_95, level_99 = np.nanpercentile(stack, [95.0, 99.0], axis=0)
    else:
        level_95 = level_99 = np.full(len(observed), np.nan)
    return {
        "method": method,
        "lag": observed.lag,
        "coefficient": observed.coefficient,
        "level_95": level_95,
        "level_99": level_99,
        "psd_slope": beta,
        "psd_slope_source": source,
        "n_sim": int(n_sim),
        "n_failed": failed,
    }
