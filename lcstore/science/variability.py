"""Variability statistics of one light curve.

The fractional variability amplitude follows Vaughan, Edelson, Warwick &
Uttley (2003, MNRAS 345, 1271); the test against a constant is the usual
chi-square of the points about their inverse-variance weighted mean.
Values and errors share one linear flux unit (never magnitudes).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import numpy.typing as npt
from scipy import stats

__all__ = ["variability_summary"]


def variability_summary(value: npt.ArrayLike, error: npt.ArrayLike) -> dict[str, Any]:
    """Summary of how variable a light curve is, beyond its measurement errors.

    With N fluxes x_i of 1σ errors σ_i:

    - weighted mean x̄_w = Σ(x_i/σ_i²)/Σ(1/σ_i²) and its error (Σ 1/σ_i²)^-1/2
      (Bevington & Robinson, Data Reduction and Error Analysis, ch. 4);
    - excess variance σ²_XS = S² − ⟨σ²_err⟩ with the sample variance S²
      (ddof = 1) and the mean squared error (Vaughan et al. 2003, eq. 8,
      number from memory);
    - fractional variability F_var = √(σ²_XS / x̄²) with the unweighted mean
      x̄ (eq. 10) and its error (eq. B2)
      √{[√(1/(2N)) ⟨σ²_err⟩/(x̄² F_var)]² + [√(⟨σ²_err⟩/N) / x̄]²}.
      When S² < ⟨σ²_err⟩ the scatter is below the noise and F_var is
      undefined: ``fvar`` is None and ``fvar_note`` says why (no absolute
      value is taken).  When S² = ⟨σ²_err⟩, F_var = 0 and its error diverges
      (``fvar_error`` None);
    - χ² = Σ((x_i − x̄_w)/σ_i)² against a constant, dof = N − 1, and its
      p-value ``scipy.stats.chi2.sf(χ², dof)`` (the probability that a
      constant source gives a χ² this large);
    - max/min flux ratio (None unless every flux is positive).

    Parameters
    ----------
    value : array_like
        Fluxes (any linear unit), at least 2, finite.
    error : array_like
        Their 1σ errors, same unit, finite and positive.

    Returns
    -------
    dict
        ``n``, ``weighted_mean``, ``weighted_mean_error``, ``mean``,
        ``excess_variance`` (flux unit squared), ``normalised_excess_variance``
        (σ²_XS/x̄²), ``fvar``, ``fvar_error``, ``fvar_defined``, ``fvar_note``,
        ``chi2``, ``dof``, ``chi2_p``, ``max_min_ratio``; plain Python
        floats/ints (or None).
    """
    x = np.asarray(value, dtype=float)
    s = np.asarray(error, dtype=float)
    if x.ndim != 1 or x.shape != s.shape:
        raise ValueError(
            "variability_summary: values and errors must be one-dimensional and equally long"
        )
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(s))):
        raise ValueError("variability_summary: values and errors must be finite")
    if np.any(s <= 0):
        raise ValueError("variability_summary: every error must be positive")
    n = x.size
    if n < 2:
        raise ValueError(f"variability_summary needs at least 2 points, got {n}")

    w = 1.0 / s**2
    weighted_mean = float(np.sum(w * x) / np.sum(w))
    weighted_mean_error = float(np.sqrt(1.0 / np.sum(w)))
    mean = float(np.mean(x))
    sample_variance = float(np.var(x, ddof=1))
    mse = float(np.mean(s**2))
    excess = sample_variance - mse

    fvar: float | None = None
    fvar_error: float | None = None
    note: str | None = None
    nxs: float | None = None
    if mean == 0.0:
        note = "F_var is undefined: the mean flux is zero"
    else:
        nxs = excess / mean**2
        if excess < 0:
            note = (
                "F_var is undefined: the sample variance is below the mean squared error "
                "(no variability above the noise)"
            )
        elif excess == 0:
            fvar = 0.0
            note = "F_var is zero: its error diverges"
        else:
            fvar = float(np.sqrt(nxs))
            term1 = np.sqrt(1.0 / (2 * n)) * mse / (mean**2 * fvar)
            term2 = np.sqrt(mse / n) / abs(mean)
            fvar_error = float(np.sqrt(term1**2 + term2**2))
        if mean < 0 and note is None:
            note = "the mean flux is negative: F_var is formally computed but hardly meaningful"

    chi2 = float(np.sum(((x - weighted_mean) / s) ** 2))
    dof = n - 1
    return {
        "n": int(n),
        "weighted_mean": weighted_mean,
        "weighted_mean_error": weighted_mean_error,
        "mean": mean,
        "excess_variance": float(excess),
        "normalised_excess_variance": None if nxs is None else float(nxs),
        "fvar": fvar,
        "fvar_error": fvar_error,
        "fvar_defined": fvar is not None,
        "fvar_note": note,
        "chi2": chi2,
        "dof": int(dof),
        "chi2_p": float(stats.chi2.sf(chi2, dof)),
        "max_min_ratio": float(x.max() / x.min()) if np.all(x > 0) else None,
    }
