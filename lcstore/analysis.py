"""Summaries of how bands move together: correlation, lags, variability, SED snapshots.

Every summary starts from the same curves the light-curve service serves
(visibility, ``as_of``, calibration offsets, canonical flux units), so a
number here can always be traced to rows of ``lightcurve/``. Upper limits are
never used as detections: correlation and lags use detections only.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from lcstore.curves import BandCurve, CurveRequest, CurveRequestError, lightcurve_build
from lcstore.models import Source
from lcstore.science import lags as lagsci
from lcstore.science.binning import weighted_mean
from lcstore.science.correlation import flux_flux, pair_nearest
from lcstore.science.units import ConversionError, from_canonical
from lcstore.science.variability import variability_summary

__all__ = [
    "LagParams",
    "SIGN_CONVENTION",
    "correlation_summary",
    "lags_summary",
    "sed_snapshot",
    "variability_bands",
]

SIGN_CONVENTION = "positive lag: y lags behind x (y's variations come later)"

Progress = Callable[[float], None]


def _curves(
    *,
    source: Source,
    user: Any,
    bands: list[str],
    bin: str | None,
    as_of: dt.datetime | None,
    base: CurveRequest | None = None,
    upper_limits: str = "exclude",
) -> list[BandCurve]:
    req = base or CurveRequest()
    req = replace(req, bands=bands, units=None, bin=bin, upper_limits=upper_limits, as_of=as_of)
    return lightcurve_build(source=source, user=user, request=req).curves


def _detections(c: BandCurve) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    keep = ~c.upper_limit & np.isfinite(c.value)
    return c.time[keep], c.value[keep], c.error[keep]


def _jsonable(v: Any) -> Any:
    if isinstance(v, np.ndarray):
        out = v.astype(object)
        if v.dtype.kind == "f":
            out[~np.isfinite(v)] = None
        return out.tolist()
    if isinstance(v, float | np.floating):
        return float(v) if np.isfinite(v) else None
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, dict):
        return {k: _jsonable(x) for k, x in v.items()}
    return v


def correlation_summary(
    *,
    source: Source,
    user: Any,
    x: str,
    y: str,
    bin: str | None = "1d",
    max_separation: float | None = None,
    as_of: dt.datetime | None = None,
    n_boot: int = 1000,
    seed: int = 0,
) -> dict[str, Any]:
    """Flux–flux pairs and their correlation coefficients and log–log slope.

    Pairs are shared bins where both bands have a detection (``bin``), or, with
    ``max_separation`` (days), each x detection with the nearest y detection
    within that separation.
    """
    if x == y:
        raise CurveRequestError("x and y must be two different bands")
    if max_separation is not None:
        cx, cy = _curves(source=source, user=user, bands=[x, y], bin=None, as_of=as_of)
        tx, fx, _ = _detections(cx)
        ty, fy, _ = _detections(cy)
        ix, iy, sep = pair_nearest(tx, fx, ty, fy, max_separation=max_separation)
        pair_t_x, pair_t_y = tx[ix], ty[iy]
        px, py = fx[ix], fy[iy]
        pairing = f"nearest detections within {max_separation:g} d (each y used once)"
    else:
        cx, cy = _curves(source=source, user=user, bands=[x, y], bin=bin or "1d", as_of=as_of)
        keep_x = ~cx.upper_limit
        keep_y = ~cy.upper_limit
        common, ix, iy = np.intersect1d(cx.time_lo[keep_x], cy.time_lo[keep_y], return_indices=True)
        del common
        px = cx.value[keep_x][ix]
        py = cy.value[keep_y][iy]
        pair_t_x = cx.time[keep_x][ix]
        pair_t_y = cy.time[keep_y][iy]
        pairing = f"shared bins of {bin or '1d'} where both bands have a detection"
    result: dict[str, Any] = {
        "x": x,
        "y": y,
        "pairing": pairing,
        "units": {x: cx.unit_label, y: cy.unit_label},
        "n_pairs": int(len(px)),
        "pairs": {"time_x": pair_t_x, "time_y": pair_t_y, "x": px, "y": py},
    }
    if len(px) < 3:
        result["note"] = "fewer than 3 pairs: no coefficients"
        return _jsonable(result)
    try:
        stats = flux_flux(px, py, n_boot=n_boot, rng=np.random.default_rng(seed))
    except ValueError as exc:
        raise CurveRequestError(str(exc)) from None
    result.update(stats)
    result["n_pairs"] = int(len(px))
    result["slope_model"] = "F_y ∝ F_x^k, fitted on log10 fluxes"
    return _jsonable(result)


@dataclass(frozen=True)
class LagParams:
    method: str = "dcf"
    lag_min: float | None = None
    lag_max: float | None = None
    lag_step: float | None = None
    local: bool = False
    min_pairs: int = 11
    bin: str | None = None
    n_sim: int = 0
    n_sig: int = 0
    psd_slope: float | None = None
    seed: int = 0
    max_grid: int = 20_000


def _default_grid(ta: np.ndarray, tb: np.ndarray, p: LagParams) -> tuple[float, float, float]:
    """Lag grid when not given: ±1/4 of the overlap of the two curves, 100 steps each way."""
    span = min(ta.max(), tb.max()) - max(ta.min(), tb.min())
    if not span > 0:
        span = max(ta.max() - ta.min(), tb.max() - tb.min(), 1.0)
    lag_max = p.lag_max if p.lag_max is not None else round(span / 4, 6)
    lag_min = p.lag_min if p.lag_min is not None else -lag_max
    step = p.lag_step if p.lag_step is not None else max((lag_max - lag_min) / 200, 1e-6)
    if not lag_max > lag_min:
        raise CurveRequestError("lag_max must exceed lag_min")
    if not step > 0:
        raise CurveRequestError("lag_step must be positive")
    if (lag_max - lag_min) / step + 1 > p.max_grid:
        raise CurveRequestError(
            f"the lag grid would have more than {p.max_grid} lags; widen lag_step"
        )
    return float(lag_min), float(lag_max), float(step)


def lags_summary(
    *,
    source: Source,
    user: Any,
    x: str,
    y: str,
    params: LagParams,
    as_of: dt.datetime | None = None,
    progress: Progress | None = None,
) -> dict[str, Any]:
    """Lag function of y against x (DCF, ZDCF or ICCF), peak and centroid, FR/RSS, levels."""
    if x == y:
        raise CurveRequestError(
            "x and y must be two different bands (use the same band twice "
            "only for an autocorrelation, which is not served here)"
        )
    cx, cy = _curves(source=source, user=user, bands=[x, y], bin=params.bin, as_of=as_of)
    ta, a, ea = _detections(cx)
    tb, b, eb = _detections(cy)
    if len(ta) < 3 or len(tb) < 3:
        raise CurveRequestError(
            f"need at least 3 detections in each band ({x}: {len(ta)}, {y}: {len(tb)})"
        )
    ea_ = ea if np.isfinite(ea).all() else None
    eb_ = eb if np.isfinite(eb).all() else None
    method = params.method
    kw: dict[str, Any]
    if method == "zdcf":
        kw = {"min_pairs": params.min_pairs, "lag_min": params.lag_min, "lag_max": params.lag_max}
    else:
        lo, hi, step = _default_grid(ta, tb, params)
        kw = {"lag_min": lo, "lag_max": hi, "lag_step": step}
        if method == "dcf":
            kw["local"] = params.local
    try:
        if method == "dcf":
            lf = lagsci.dcf(ta, a, ea_, tb, b, eb_, **kw)
        elif method == "zdcf":
            lf = lagsci.zdcf(ta, a, ea_, tb, b, eb_, **kw)
        elif method == "iccf":
            lf = lagsci.iccf(ta, a, tb, b, **kw)
        else:
            raise CurveRequestError(f"unknown method {method!r}: dcf, zdcf or iccf")
        peak, centroid = lagsci.peak_and_centroid(lf)
    except ValueError as exc:
        raise CurveRequestError(str(exc)) from None
    if progress:
        progress(0.1)
    result: dict[str, Any] = {
        "x": x,
        "y": y,
        "method": method,
        "method_detail": lf.method,
        "sign_convention": SIGN_CONVENTION,
        "lag_unit": "d",
        "parameters": {k: v for k, v in kw.items()} | {"bin": params.bin},
        "n_points": {x: int(len(ta)), y: int(len(tb))},
        "peak_lag": peak,
        "centroid_lag": centroid,
        "centroid_threshold": 0.8,
        "rows": {
            "lag": lf.lag,
            "coefficient": lf.coefficient,
            "error": lf.error,
            "n_pairs": lf.n_pairs,
            "lag_lo": lf.lag_lo,
            "lag_hi": lf.lag_hi,
            "error_lo": lf.error_lo,
            "error_hi": lf.error_hi,
        },
    }
    rng = np.random.default_rng(params.seed)
    if params.n_sim:
        unc = lagsci.lag_uncertainty(
            ta, a, ea_, tb, b, eb_, method=method, n_sim=params.n_sim, rng=rng, **kw
        )
        result["uncertainty"] = {
            "method": "flux randomisation / random subset selection (Peterson et al. 1998)",
            "n_sim": unc["n_sim"],
            "n_failed": unc["n_failed"],
            "peak": {"median": unc["peak_median"], "p16": unc["peak_p16"], "p84": unc["peak_p84"]},
            "centroid": {
                "median": unc["centroid_median"],
                "p16": unc["centroid_p16"],
                "p84": unc["centroid_p84"],
            },
            "interval": "68 % (16th to 84th percentile)",
        }
        if progress:
            progress(0.5 if params.n_sig else 0.95)
    if params.n_sig:
        sig = lagsci.lag_significance(
            ta,
            a,
            ea_,
            tb,
            b,
            eb_,
            method=method,
            n_sim=params.n_sig,
            rng=rng,
            psd_slope=params.psd_slope,
            **kw,
        )
        result["significance"] = {
            "method": "uncorrelated red-noise simulations of x (Timmer & König 1995) with the "
            "observed sampling, correlated with the observed y",
            "n_sim": sig["n_sim"],
            "n_failed": sig["n_failed"],
            "psd_slope": sig["psd_slope"],
            "psd_slope_source": sig["psd_slope_source"],
            "level_95": sig["level_95"],
            "level_99": sig["level_99"],
        }
    if progress:
        progress(1.0)
    return _jsonable(result)


def variability_bands(
    *,
    source: Source,
    user: Any,
    bands: list[str] | None,
    bin: str | None = None,
    as_of: dt.datetime | None = None,
) -> dict[str, Any]:
    """Per band: n, weighted mean, F_var and its error, chi-square against a constant."""
    req = CurveRequest(bands=bands, bin=bin, upper_limits="exclude", as_of=as_of)
    lc = lightcurve_build(source=source, user=user, request=req)
    out = []
    for c in lc.curves:
        t, v, e = _detections(c)
        entry: dict[str, Any] = {"band": c.band.slug, "unit": c.unit_label}
        if len(v) < 2:
            entry.update({"n": int(len(v)), "note": "fewer than 2 detections"})
        elif not np.all(np.isfinite(e) & (e > 0)):
            entry.update(
                {
                    "n": int(len(v)),
                    "note": "some detections have no error: F_var and chi-square need every error",
                }
            )
        else:
            entry.update(variability_summary(v, e))
        out.append(_jsonable(entry))
    return {
        "source": source.slug,
        "bin": bin,
        "bands": out,
        "method": "F_var: Vaughan et al. 2003 eq. 10 and B2; chi-square against the weighted mean",
    }


def sed_snapshot(
    *,
    source: Source,
    user: Any,
    at: float,
    window: float,
    bands: list[str] | None = None,
    as_of: dt.datetime | None = None,
    deredden: bool = False,
) -> dict[str, Any]:
    """νF_ν per band from the detections with |t − at| ≤ window/2, weighted as in binning."""
    if not window > 0:
        raise CurveRequestError("window must be positive (days)")
    req = CurveRequest(
        bands=bands, start=at - window / 2, end=at + window / 2, as_of=as_of, upper_limits="include"
    )
    lc = lightcurve_build(source=source, user=user, request=req)
    rows = []
    for c in lc.curves:
        if len(c) == 0:
            continue
        spec = c.band.spec()
        try:
            nufnu, err, label = from_canonical(c.value, c.error, "nufnu", spec)
        except ConversionError:
            continue
        factor = 1.0
        if deredden and spec.kind == "flux_density" and spec.wavelength_eff_aa:
            from lcstore.science.dust import deredden_factor

            factor = float(deredden_factor(spec.wavelength_eff_aa, ebv=source.ebv))
        value, error, is_limit, n = weighted_mean(nufnu * factor, err * factor, c.upper_limit)
        freq = spec.frequency_hz()
        from astropy import units as u

        rows.append(
            {
                "band": c.band.slug,
                "frequency_hz": freq,
                "energy_kev": float((freq * u.Hz).to_value(u.keV, u.spectral())) if freq else None,
                "wavelength_aa": spec.wavelength_eff_aa,
                "nufnu": value,
                "error": error,
                "upper_limit": bool(is_limit),
                "n": int(n),
                "time_mean": float(np.mean(c.time)),
            }
        )
    rows.sort(key=lambda r: r["frequency_hz"] or 0.0)
    return _jsonable(
        {
            "source": source.slug,
            "at": at,
            "window": window,
            "selection": "points with |t - at| <= window/2 (MJD TDB)",
            "unit": "erg / (cm2 s)",
            "dereddened": deredden,
            "rows": rows,
            "provenance": [
                {
                    "upload": u_.pk,
                    "uploader": u_.uploader.username,
                    "reduction": u_.reduction,
                    "reference": u_.reference,
                    "instrument": u_.instrument.slug,
                }
                for u_ in lc.uploads
            ],
        }
    )
