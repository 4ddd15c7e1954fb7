"""Server-side figures: stacked light curves, flux–flux correlations, lag functions.

Pure functions on arrays returning PNG or SVG bytes; no Django, no pyplot.
Figures are built on :class:`matplotlib.figure.Figure` directly and rendered
by matplotlib's Agg (PNG) and SVG backends, so nothing global (backend, rc
parameters) is changed for good and the functions are safe to call from
several request threads at once (SVG output briefly sets its own two
``svg.*`` parameters, the same for every call).

Design choices, the same in every figure:

- colours: Paul Tol's colour-blind-safe "muted" qualitative scheme (Tol 2021,
  *Colour Schemes*, SRON/EPS/TN/09-002), the light tones last; every band
  also has its own marker shape, so panels stay distinct in grey scale;
- upper limits: a downward arrow whose bar sits on the limit, drawn in screen
  space (so it points down on linear, logarithmic and inverted axes alike:
  on a magnitude axis down is fainter);
- magnitudes on an inverted axis; fluxes on a logarithmic axis when their
  positive values span more than two decades;
- times without an offset (``60012.5``, never ``+6e4``), and the time system
  named on the axis by the caller (``MJD (TDB, barycentric)``).
"""

from __future__ import annotations

import io
import re
from collections.abc import Mapping, Sequence
from typing import Any, Literal

import numpy as np
import numpy.typing as npt
from matplotlib import rc_context
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.path import Path as MplPath
from matplotlib.ticker import FuncFormatter, MaxNLocator, ScalarFormatter

__all__ = [
    "LIMIT_MARKER",
    "MARKERS",
    "PALETTE",
    "TIME_AXIS_PX",
    "correlation_figure",
    "lags_figure",
    "lightcurve_figure",
    "lightcurve_height",
]

Format = Literal["png", "svg"]

#: Tol's muted scheme, reordered so neighbouring panels differ in hue and lightness.
PALETTE: tuple[str, ...] = (
    "#332288",  # indigo
    "#CC6677",  # rose
    "#117733",  # green
    "#882255",  # wine
    "#44AA99",  # teal
    "#999933",  # olive
    "#AA4499",  # purple
    "#88CCEE",  # cyan
    "#DDCC77",  # sand
)
#: One marker shape per band (no downward triangle: that shape reads as a limit).
MARKERS: tuple[str, ...] = ("o", "s", "D", "^", "h", "p", "X", "P", "<")

#: Downward arrow with a bar at the top; the bar (0, 0) is anchored on the limit value.
LIMIT_MARKER = MplPath(
    [(-0.5, 0.0), (0.5, 0.0), (0.0, 0.0), (0.0, -1.6), (-0.38, -1.1), (0.0, -1.6), (0.38, -1.1)],
    [
        MplPath.MOVETO,
        MplPath.LINETO,
        MplPath.MOVETO,
        MplPath.LINETO,
        MplPath.MOVETO,
        MplPath.LINETO,
        MplPath.LINETO,
    ],
)

#: Pixels (at 100 dpi) below the stacked panels for the shared time axis and its label.
TIME_AXIS_PX = 48
#: Above this many points in one artist, SVG output embeds it as an image (files stay small).
RASTER_ABOVE = 5000

_TEXT = "#222222"
_MUTED = "#666666"
_GRID = "#DDDDDD"
_ACCENT = "#CC6677"
_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def lightcurve_height(n_panels: int, height_px_per_panel: int = 220, dpi: float = 100) -> int:
    """Height in pixels of a light-curve figure of ``n_panels`` stacked panels.

    The panels take ``height_px_per_panel`` each; the shared time axis below
    them takes :data:`TIME_AXIS_PX` at 100 dpi (its text grows with dpi).
    """
    return n_panels * height_px_per_panel + round(TIME_AXIS_PX * dpi / 100)


def _check_format(fmt: str) -> None:
    if fmt not in ("png", "svg"):
        raise ValueError(f"fmt must be 'png' or 'svg', not {fmt!r}")


def _check_size(width_px: int, height_px: int, dpi: float) -> None:
    if not (width_px >= 100 and height_px >= 100):
        raise ValueError(f"a figure needs at least 100 x 100 pixels, not {width_px} x {height_px}")
    if not dpi > 0:
        raise ValueError(f"dpi must be positive, not {dpi}")


def _figure(
    width_px: int,
    height_px: int,
    dpi: float,
    *,
    bottom_px: float,
    title: bool,
    left_px: float = 84,
    right_px: float = 18,
    top_px: float = 10,
    gap_px: float = 0,
    n_rows: int = 1,
) -> Figure:
    """A figure with fixed margins (pixels at 100 dpi, scaled with dpi like the fonts).

    Fixed margins keep every panel the same height and cost nothing at draw
    time (a constrained layout would double the rendering time).
    """
    fig = Figure(figsize=(width_px / dpi, height_px / dpi), dpi=dpi)
    fig.patch.set_facecolor("white")
    k = dpi / 100
    top = (top_px + (22 if title else 0)) * k
    axes_height = (height_px - top - bottom_px * k) / n_rows
    fig.subplots_adjust(
        left=left_px * k / width_px,
        right=1 - right_px * k / width_px,
        bottom=bottom_px * k / height_px,
        top=1 - top / height_px,
        hspace=gap_px * k / max(axes_height, 1.0),
    )
    return fig


#: SVG text stays text (searchable, accessible, small) and ids are reproducible.
_SVG_RC = {"svg.fonttype": "none", "svg.hashsalt": "lcstore"}


def _render(fig: Figure, fmt: Format) -> bytes:
    buf = io.BytesIO()
    if fmt == "svg":
        with rc_context(_SVG_RC):
            fig.savefig(buf, format="svg", dpi=fig.dpi, metadata={"Date": None})
    else:
        fig.savefig(buf, format="png", dpi=fig.dpi, metadata={"Software": "lcstore"})
    return buf.getvalue()


def _pretty_unit(unit: str) -> str:
    """``erg / (cm2 s)`` → ``erg / (cm² s)``; ``AA`` → ``Å``; ``ABmag`` → ``AB mag``."""
    text = unit.strip()
    if text == "ABmag":
        return "AB mag"
    text = re.sub(r"\bAA\b", "Å", text)
    return re.sub(r"(?<=[A-Za-zÅ])(-?\d+)", lambda m: m.group(1).translate(_SUPERSCRIPT), text)


def _quantity(unit: str, is_magnitude: bool) -> str:
    """The physical quantity a unit string measures, in plain words."""
    if is_magnitude:
        return "magnitude"
    u = unit.replace(" ", "")
    if "Jy" in u or "Hz" in u or "AA" in u or "Angstrom" in u:
        return "flux density"
    if re.search(r"\bph|photon", unit):
        return "photon flux"
    if re.search(r"\bct|count", unit):
        return "count rate"
    if "erg" in u or re.search(r"\bW\b", unit):
        return "energy flux"
    return "flux"


def _style_axes(ax: Axes) -> None:
    ax.set_facecolor("white")
    ax.grid(True, color=_GRID, linewidth=0.6, linestyle="-")
    ax.set_axisbelow(True)
    ax.tick_params(
        which="both", direction="in", top=True, right=True, labelsize=9, colors=_TEXT, length=3
    )
    ax.tick_params(which="major", length=5)
    for spine in ax.spines.values():
        spine.set_color("#555555")
        spine.set_linewidth(0.8)


def _legend(ax: Axes, *, first: str, **kw: Any) -> None:
    """A frameless legend with the data entry (label starting ``first``) on top."""
    handles, labels = ax.get_legend_handles_labels()
    if not handles:
        return
    order = sorted(range(len(labels)), key=lambda k: not labels[k].startswith(first))
    kw.setdefault("fontsize", 8.5)
    ax.legend([handles[k] for k in order], [labels[k] for k in order], frameon=False, **kw)


def _linear_value_axis(ax: Axes, values: np.ndarray, is_magnitude: bool) -> str:
    """Plain tick labels on a linear value axis; tiny or huge fluxes get a power of ten.

    Returns the factor for the axis label (``10⁻¹¹ ``) or "" — the factor sits
    in the label rather than in an offset text that would run into the panel above.
    """
    peak = float(np.max(np.abs(values))) if values.size else 0.0
    if is_magnitude or not peak or 1e-2 <= peak < 1e4:
        formatter = ScalarFormatter(useOffset=False)
        formatter.set_scientific(False)
        ax.yaxis.set_major_formatter(formatter)
        return ""
    exponent = int(np.floor(np.log10(peak)))
    factor = 10.0**exponent
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v / factor:.4g}"))
    return f"10{str(exponent).translate(_SUPERSCRIPT)} "


def _plain_time_axis(ax: Axes) -> None:
    formatter = ScalarFormatter(useOffset=False)
    formatter.set_scientific(False)
    ax.xaxis.set_major_formatter(formatter)
    ax.xaxis.set_major_locator(MaxNLocator(nbins=9, steps=[1, 2, 2.5, 5, 10]))


def _as_float(a: npt.ArrayLike | None, n: int, fill: float = np.nan) -> np.ndarray:
    if a is None:
        return np.full(n, fill)
    out = np.asarray(a, dtype=float).reshape(-1)
    if out.size != n:
        raise ValueError(f"arrays of one panel differ in length ({out.size} vs {n})")
    return out


def _log_padding(values: np.ndarray, fraction: float = 0.08) -> tuple[float, float]:
    lo, hi = np.log10(values.min()), np.log10(values.max())
    pad = max((hi - lo) * fraction, 0.05)
    return 10 ** (lo - pad), 10 ** (hi + pad)


def _draw_panel(ax: Axes, panel: Mapping[str, Any], index: int) -> None:
    t = np.asarray(panel["time"], dtype=float).reshape(-1)
    n = t.size
    v = _as_float(panel["value"], n)
    e = _as_float(panel.get("error"), n)
    ul = panel.get("upper_limit")
    limit = np.zeros(n, bool) if ul is None else np.asarray(ul, dtype=bool).reshape(-1)
    if limit.size != n:
        raise ValueError(f"arrays of one panel differ in length ({limit.size} vs {n})")
    is_mag = bool(panel.get("is_magnitude", False))
    unit = str(panel.get("unit") or "")
    band = str(panel.get("band") or f"band {index + 1}")
    # A caller may give a stable "style" number per band (e.g. its catalogue id), so a
    # band keeps its colour and symbol from plot to plot; otherwise the panel's position.
    style = int(panel.get("style", index))
    colour = PALETTE[style % len(PALETTE)]
    marker = MARKERS[style % len(MARKERS)]

    shown = np.isfinite(t) & np.isfinite(v)
    positive = shown & (v > 0)
    use_log = (
        not is_mag
        and positive.sum() >= 2
        and v[positive].max() / v[positive].min() > 100.0  # more than two decades
    )
    if use_log:
        ax.set_yscale("log")
        hidden = int((shown & ~positive).sum())
        shown = positive
        if hidden:
            ax.text(
                0.995,
                0.03,
                f"{hidden} point(s) ≤ 0 not shown on the log axis",
                transform=ax.transAxes,
                ha="right",
                va="bottom",
                fontsize=7.5,
                color=_MUTED,
            )
    det = shown & ~limit
    lim = shown & limit

    if det.any():
        err = np.where(np.isfinite(e[det]) & (e[det] > 0), e[det], 0.0)
        big = bool(det.sum() > RASTER_ABOVE)
        container = ax.errorbar(
            t[det],
            v[det],
            yerr=err if err.any() else None,
            fmt=marker,
            markersize=3.8 if not big else 2.0,
            color=colour,
            markerfacecolor=colour,
            markeredgecolor="white",
            markeredgewidth=0.35,
            ecolor=colour,
            elinewidth=0.8,
            capsize=0,
            alpha=0.9,
            zorder=3,
            label="detection",
            rasterized=big,
        )
        container.lines[0].set_gid(f"detections-{index}")
        for coll in container.lines[2]:
            coll.set_alpha(0.55)
            coll.set_rasterized(big)
    if lim.any():
        (arrows,) = ax.plot(
            t[lim],
            v[lim],
            linestyle="none",
            marker=LIMIT_MARKER,
            markersize=20,
            markerfacecolor="none",
            markeredgecolor=colour,
            markeredgewidth=1.1,
            alpha=0.75,
            zorder=2,
            label="upper limit",
            rasterized=bool(lim.sum() > RASTER_ABOVE),
        )
        arrows.set_gid(f"upper-limits-{index}")
    if not (det.any() or lim.any()):
        ax.text(
            0.5,
            0.5,
            "no points in this band",
            transform=ax.transAxes,
            ha="center",
            va="center",
            fontsize=9,
            color=_MUTED,
        )
    scale = ""
    if use_log:
        ax.set_ylim(*_log_padding(v[det | lim]))
    else:
        ax.margins(y=0.14)
        ax.yaxis.set_major_locator(MaxNLocator(nbins=5, prune="upper"))
        scale = _linear_value_axis(ax, v[det | lim], is_mag)
    if is_mag:
        ax.invert_yaxis()

    quantity = str(panel.get("quantity") or _quantity(unit, is_mag))
    if is_mag:
        system = unit.replace("mag", "").strip(" ()")
        label = f"{quantity} ({system})" if system else quantity
    else:
        label = f"{quantity} ({scale}{_pretty_unit(unit)})" if unit or scale else quantity
    ax.set_ylabel(label, fontsize=9.5, color=_TEXT)
    ax.text(
        0.006,
        0.95,
        band,
        transform=ax.transAxes,
        ha="left",
        va="top",
        fontsize=10,
        fontweight="bold",
        color=colour,
        bbox={
            "boxstyle": "round,pad=0.25",
            "facecolor": "white",
            "edgecolor": "none",
            "alpha": 0.85,
        },
        zorder=5,
    )
    if lim.any():
        _legend(ax, first="detection", loc="upper right", ncols=2, fontsize=8, handletextpad=0.3)


def _build_lightcurve_figure(
    panels: Sequence[Mapping[str, Any]],
    *,
    time_label: str,
    width_px: int = 1000,
    height_px_per_panel: int = 220,
    dpi: float = 100,
    title: str | None = None,
) -> Figure:
    """The Figure of :func:`lightcurve_figure` (for tests and for callers that add to it)."""
    if not panels:
        raise ValueError("a light-curve figure needs at least one panel")
    height = lightcurve_height(len(panels), height_px_per_panel, dpi)
    _check_size(width_px, height, dpi)
    fig = _figure(
        width_px,
        height,
        dpi,
        bottom_px=TIME_AXIS_PX,
        title=bool(title),
        gap_px=6,
        n_rows=len(panels),
    )
    axes = fig.subplots(len(panels), 1, sharex=True, squeeze=False)[:, 0]
    for i, (ax, panel) in enumerate(zip(axes, panels, strict=True)):
        _style_axes(ax)
        _draw_panel(ax, panel, i)
    _plain_time_axis(axes[-1])
    axes[-1].set_xlabel(time_label, fontsize=10, color=_TEXT)
    fig.align_ylabels(list(axes))
    if title:
        fig.suptitle(title, fontsize=11, color=_TEXT)
    return fig


def lightcurve_figure(
    panels: Sequence[Mapping[str, Any]],
    *,
    time_label: str,
    fmt: Format,
    width_px: int = 1000,
    height_px_per_panel: int = 220,
    dpi: float = 100,
    title: str | None = None,
) -> bytes:
    """Stacked light-curve panels, one per band, on a shared time axis.

    Parameters
    ----------
    panels : sequence of dict
        One per band, top to bottom, with keys ``band`` (label), ``unit``
        (unit label, e.g. ``mJy``, ``erg / (cm2 s)``, ``mag``, ``ABmag``),
        ``time`` (numbers, e.g. MJD), ``value``, ``error`` (1σ, NaN or None
        when absent), ``upper_limit`` (bool per point; the value is the limit)
        and ``is_magnitude``; optionally ``quantity`` (y-axis words, default
        from the unit: flux density, energy flux, photon flux, count rate).
    time_label : str
        The x-axis label naming the time system, e.g. ``MJD (TDB, barycentric)``.
    fmt : {'png', 'svg'}
    width_px, height_px_per_panel : int
        The PNG is exactly ``width_px`` × :func:`lightcurve_height` pixels
        (the SVG the same size in points × 72/dpi).
    dpi : float
    title : str, optional

    Returns
    -------
    bytes
        The PNG or SVG document.
    """
    _check_format(fmt)
    fig = _build_lightcurve_figure(
        panels,
        time_label=time_label,
        width_px=width_px,
        height_px_per_panel=height_px_per_panel,
        dpi=dpi,
        title=title,
    )
    return _render(fig, fmt)


def _build_correlation_figure(
    x: npt.ArrayLike,
    y: npt.ArrayLike,
    *,
    x_label: str,
    y_label: str,
    slope: float | None,
    intercept: float | None,
    slope_error: float | None = None,
    x_error: npt.ArrayLike | None = None,
    y_error: npt.ArrayLike | None = None,
    width_px: int = 640,
    height_px: int = 560,
    dpi: float = 100,
    title: str | None = None,
) -> Figure:
    """The Figure of :func:`correlation_figure`."""
    _check_size(width_px, height_px, dpi)
    xv = np.asarray(x, dtype=float).reshape(-1)
    yv = _as_float(y, xv.size)
    xe = _as_float(x_error, xv.size)
    ye = _as_float(y_error, xv.size)
    fig = _figure(width_px, height_px, dpi, bottom_px=52, title=bool(title))
    ax = fig.subplots()
    _style_axes(ax)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ok = np.isfinite(xv) & np.isfinite(yv) & (xv > 0) & (yv > 0)
    n_hidden = int(xv.size - ok.sum())
    colour = PALETTE[0]
    if ok.any():
        xerr = np.where(np.isfinite(xe[ok]) & (xe[ok] > 0), xe[ok], 0.0)
        yerr = np.where(np.isfinite(ye[ok]) & (ye[ok] > 0), ye[ok], 0.0)
        container = ax.errorbar(
            xv[ok],
            yv[ok],
            xerr=xerr if xerr.any() else None,
            yerr=yerr if yerr.any() else None,
            fmt="o",
            markersize=4.5,
            color=colour,
            markeredgecolor="white",
            markeredgewidth=0.4,
            ecolor=colour,
            elinewidth=0.7,
            capsize=0,
            alpha=0.85,
            zorder=3,
            label=f"pairs (n = {int(ok.sum())})",
            rasterized=bool(ok.sum() > RASTER_ABOVE),
        )
        container.lines[0].set_gid("pairs")
        for coll in container.lines[2]:
            coll.set_alpha(0.45)
        ax.set_xlim(*_log_padding(xv[ok]))
        ax.set_ylim(*_log_padding(yv[ok]))
    fitted = (
        ok.sum() >= 2
        and slope is not None
        and intercept is not None
        and np.isfinite(slope)
        and np.isfinite(intercept)
    )
    if fitted:
        xs = np.logspace(np.log10(xv[ok].min()), np.log10(xv[ok].max()), 64)
        k = float(slope)  # type: ignore[arg-type]
        err = (
            f" ± {slope_error:.2f}" if slope_error is not None and np.isfinite(slope_error) else ""
        )
        (line,) = ax.plot(
            xs,
            10.0 ** float(intercept) * xs**k,  # type: ignore[arg-type]
            color=_ACCENT,
            linewidth=1.6,
            zorder=4,
            label=rf"log–log fit $F_y \propto F_x^{{\,k}}$, k = {k:.2f}{err}",
        )
        line.set_gid("fit")
    notes = []
    if n_hidden:
        notes.append(f"{n_hidden} pair(s) with a non-positive or missing flux not shown")
    if not fitted:
        notes.append("no fitted slope")
    if notes:
        ax.text(
            0.99,
            0.02,
            "; ".join(notes),
            transform=ax.transAxes,
            ha="right",
            va="bottom",
            fontsize=8,
            color=_MUTED,
        )
    if ok.any() or fitted:
        _legend(ax, first="pairs", loc="upper left")
    ax.set_xlabel(x_label, fontsize=10, color=_TEXT)
    ax.set_ylabel(y_label, fontsize=10, color=_TEXT)
    if title:
        ax.set_title(title, fontsize=11, color=_TEXT)
    return fig


def correlation_figure(
    x: npt.ArrayLike,
    y: npt.ArrayLike,
    *,
    x_label: str,
    y_label: str,
    slope: float | None,
    intercept: float | None,
    fmt: Format,
    slope_error: float | None = None,
    x_error: npt.ArrayLike | None = None,
    y_error: npt.ArrayLike | None = None,
    width_px: int = 640,
    height_px: int = 560,
    dpi: float = 100,
    title: str | None = None,
) -> bytes:
    """Flux–flux scatter of paired fluxes on log axes, with the fitted power law.

    Parameters
    ----------
    x, y : array_like
        Paired fluxes (any positive linear unit; pairs with a flux ≤ 0 cannot
        be shown on log axes and are counted in a note).
    x_label, y_label : str
        Axis labels with units, e.g. ``r flux density (mJy)``.
    slope, intercept : float or None
        The log–log fit ``log10 F_y = intercept + slope · log10 F_x``
        (intercept in log10 of the units of x and y); None draws no line.
    fmt : {'png', 'svg'}
    slope_error : float, optional
        Shown in the legend.
    x_error, y_error : array_like, optional
        1σ errors of the fluxes.
    width_px, height_px, dpi, title
        Size of the PNG in pixels (exact), resolution, optional title.
    """
    _check_format(fmt)
    fig = _build_correlation_figure(
        x,
        y,
        x_label=x_label,
        y_label=y_label,
        slope=slope,
        intercept=intercept,
        slope_error=slope_error,
        x_error=x_error,
        y_error=y_error,
        width_px=width_px,
        height_px=height_px,
        dpi=dpi,
        title=title,
    )
    return _render(fig, fmt)


_METHOD_NAMES = {"dcf": "DCF", "zdcf": "ZDCF", "iccf": "ICCF r"}
_LEVEL_STYLES = (("--", "#555555"), (":", "#222222"), ("-.", "#888888"))


def _build_lags_figure(
    lag: npt.ArrayLike,
    coefficient: npt.ArrayLike,
    error: npt.ArrayLike | None,
    *,
    method: str,
    levels: Mapping[str, npt.ArrayLike] | None = None,
    peak: float | None = None,
    centroid: float | None = None,
    x_name: str | None = None,
    y_name: str | None = None,
    lag_unit: str = "d",
    width_px: int = 900,
    height_px: int = 420,
    dpi: float = 100,
    title: str | None = None,
) -> Figure:
    """The Figure of :func:`lags_figure`."""
    _check_size(width_px, height_px, dpi)
    lv = np.asarray(lag, dtype=float).reshape(-1)
    cv = _as_float(coefficient, lv.size)
    if error is None:
        ev = np.zeros((2, lv.size))
    else:
        ev = np.asarray(error, dtype=float)
        if ev.ndim == 1:
            ev = np.vstack([ev, ev])
        if ev.shape != (2, lv.size):
            raise ValueError("error must have the length of lag, or shape (2, len(lag))")
    fig = _figure(width_px, height_px, dpi, bottom_px=52, title=bool(title))
    ax = fig.subplots()
    _style_axes(ax)
    ax.axhline(0.0, color="#999999", linewidth=0.8, zorder=1)
    ok = np.isfinite(lv) & np.isfinite(cv)
    colour = PALETTE[0]
    name = _METHOD_NAMES.get(method.lower(), method)
    if ok.any():
        err = np.where(np.isfinite(ev[:, ok]) & (ev[:, ok] > 0), ev[:, ok], 0.0)
        container = ax.errorbar(
            lv[ok],
            cv[ok],
            yerr=err if err.any() else None,
            fmt="o-",
            markersize=3.5,
            linewidth=0.9,
            color=colour,
            markeredgecolor="white",
            markeredgewidth=0.3,
            ecolor=colour,
            elinewidth=0.8,
            capsize=0,
            zorder=3,
            label=name,
        )
        container.lines[0].set_gid("coefficient")
        for coll in container.lines[2]:
            coll.set_alpha(0.5)
    else:
        ax.text(
            0.5,
            0.5,
            "no lag bin has enough pairs",
            transform=ax.transAxes,
            ha="center",
            va="center",
            color=_MUTED,
        )
    for i, (key, curve) in enumerate((levels or {}).items()):
        cl = _as_float(curve, lv.size)
        good = np.isfinite(lv) & np.isfinite(cl)
        style, shade = _LEVEL_STYLES[i % len(_LEVEL_STYLES)]
        (line,) = ax.plot(
            lv[good],
            cl[good],
            linestyle=style,
            color=shade,
            linewidth=1.1,
            zorder=2,
            label=f"{key} % level (simulations)",
        )
        line.set_gid(f"level-{key}")
    for value, style, label, gid in (
        (peak, "-", "peak", "peak"),
        (centroid, "--", "centroid", "centroid"),
    ):
        if value is not None and np.isfinite(value):
            line = ax.axvline(
                float(value),
                color=_ACCENT,
                linestyle=style,
                linewidth=1.2,
                zorder=4,
                label=f"{label} {float(value):.3g} {lag_unit}",
            )
            line.set_gid(gid)
    who = f"{y_name} lags {x_name}" if x_name and y_name else "y lags x"
    ax.set_xlabel(f"lag ({lag_unit}); > 0: {who}", fontsize=10, color=_TEXT)
    ax.set_ylabel(f"{name} coefficient" if name != "ICCF r" else "ICCF r", fontsize=10)
    ax.margins(x=0.02, y=0.1)
    _legend(ax, first=name, loc="upper right")
    if title:
        ax.set_title(title, fontsize=11, color=_TEXT)
    return fig


def lags_figure(
    lag: npt.ArrayLike,
    coefficient: npt.ArrayLike,
    error: npt.ArrayLike | None,
    *,
    method: str,
    levels: Mapping[str, npt.ArrayLike] | None = None,
    peak: float | None = None,
    centroid: float | None = None,
    fmt: Format,
    x_name: str | None = None,
    y_name: str | None = None,
    lag_unit: str = "d",
    width_px: int = 900,
    height_px: int = 420,
    dpi: float = 100,
    title: str | None = None,
) -> bytes:
    """A lag function (DCF, ZDCF or ICCF) with its error bars and significance levels.

    Parameters
    ----------
    lag, coefficient : array_like
        Lag-bin centres (days) and the correlation coefficient; NaN bins are skipped.
    error : array_like or None
        1σ errors: one array, or ``(lower, upper)`` with shape (2, N) (ZDCF).
    method : str
        ``dcf``, ``zdcf`` or ``iccf`` (names the y axis).
    levels : dict of str to array_like, optional
        Significance curves on the same lags, e.g. ``{"95": …, "99": …}``.
    peak, centroid : float, optional
        Peak and centroid lags, drawn as vertical lines.
    fmt : {'png', 'svg'}
    x_name, y_name : str, optional
        Band names for the sign convention on the x axis (``> 0: gamma lags r``);
        without them it reads ``> 0: y lags x``.
    lag_unit, width_px, height_px, dpi, title
        Unit label of the lags, PNG size in pixels (exact), resolution, title.
    """
    _check_format(fmt)
    fig = _build_lags_figure(
        lag,
        coefficient,
        error,
        method=method,
        levels=levels,
        peak=peak,
        centroid=centroid,
        x_name=x_name,
        y_name=y_name,
        lag_unit=lag_unit,
        width_px=width_px,
        height_px=height_px,
        dpi=dpi,
        title=title,
    )
    return _render(fig, fmt)
