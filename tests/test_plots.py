"""Server-side figures read back with outside tools.

References: PNG files decoded with Pillow (size in pixels, mode); SVG documents
parsed with the standard library's ``xml.etree.ElementTree`` (matplotlib names
each axes group ``axes_1``, ``axes_2`` …, and writes an artist's gid as the id
of its group); the fitted line recomputed with numpy from
``log10 F_y = intercept + slope · log10 F_x``. No database is needed.
"""

from __future__ import annotations

import io
import re
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from matplotlib.markers import MarkerStyle
from PIL import Image

from lcstore import plots

ROOT = Path(__file__).resolve().parents[1]
SVG = "{http://www.w3.org/2000/svg}"
TIME_LABEL = "MJD (TDB, barycentric)"


def _panel(
    band: str,
    unit: str,
    value: np.ndarray,
    *,
    limits: np.ndarray | None = None,
    is_magnitude: bool = False,
    error: np.ndarray | None = None,
) -> dict[str, Any]:
    n = value.size
    return {
        "band": band,
        "unit": unit,
        "time": 60000.0 + np.arange(n) * 0.5,
        "value": value,
        "error": np.full(n, 0.05) if error is None else error,
        "upper_limit": np.zeros(n, bool) if limits is None else limits,
        "is_magnitude": is_magnitude,
    }


@pytest.fixture
def three_panels() -> list[dict[str, Any]]:
    """A magnitude band, a flux band over 3 decades with limits, a count-rate band."""
    k = np.arange(40)
    gamma = 1e-8 * 10 ** (3 * k / 39)  # 1e-8 .. 1e-5: three decades
    limits = k % 7 == 0
    gamma_err = np.where(limits, np.nan, 0.1 * gamma)
    return [
        _panel("r", "mag", 14 + 0.3 * np.sin(k / 5), is_magnitude=True),
        _panel("gamma", "ph / (cm2 s)", gamma, limits=limits, error=gamma_err),
        _panel("xray", "ct / s", 2 + np.cos(k / 4)),
    ]


def _svg_axes_groups(svg: bytes) -> list[str]:
    root = ET.fromstring(svg)
    assert root.tag == SVG + "svg"
    return [
        g.get("id", "") for g in root.iter(SVG + "g") if re.fullmatch(r"axes_\d+", g.get("id", ""))
    ]


def _svg_ids(svg: bytes) -> set[str]:
    return {el.get("id", "") for el in ET.fromstring(svg).iter()}


@pytest.mark.parametrize(
    ("n", "width", "per_panel", "dpi"),
    [(1, 1000, 220, 100), (3, 1000, 220, 100), (2, 777, 180, 96)],
)
def test_lightcurve_png_has_the_expected_size(
    three_panels: list[dict[str, Any]], n: int, width: int, per_panel: int, dpi: int
) -> None:
    """Pillow reads the PNG back: width_px x (n x height_px_per_panel + time axis strip)."""
    png = plots.lightcurve_figure(
        three_panels[:n],
        time_label=TIME_LABEL,
        fmt="png",
        width_px=width,
        height_px_per_panel=per_panel,
        dpi=dpi,
    )
    with Image.open(io.BytesIO(png)) as im:
        assert im.format == "PNG"
        # the panels, plus the time-axis strip (TIME_AXIS_PX at 100 dpi, scaled with dpi)
        assert im.size == (width, n * per_panel + round(plots.TIME_AXIS_PX * dpi / 100))
        assert im.size[1] == plots.lightcurve_height(n, per_panel, dpi)
        assert im.mode == "RGBA"


@pytest.mark.parametrize("n", [3])
def test_lightcurve_svg_parses_with_one_axes_group_per_panel(
    three_panels: list[dict[str, Any]], n: int
) -> None:
    """xml.etree parses the SVG; matplotlib's axes groups are axes_1 .. axes_n."""
    svg = plots.lightcurve_figure(three_panels[:n], time_label=TIME_LABEL, fmt="svg", dpi=100)
    assert _svg_axes_groups(svg) == [f"axes_{i + 1}" for i in range(n)]
    root = ET.fromstring(svg)
    # SVG size in points: pixels x 72 / dpi
    assert float(root.get("width", "").removesuffix("pt")) == pytest.approx(1000 * 72 / 100)
    height_px = plots.lightcurve_height(n, 220)
    assert float(root.get("height", "").removesuffix("pt")) == pytest.approx(height_px * 72 / 100)
    if n == 3:  # the limits of the gamma panel are an artist of their own
        assert "upper-limits-1" in _svg_ids(svg)
    assert TIME_LABEL.encode() in svg  # text is kept as text


def test_magnitude_panels_are_inverted_and_flux_panels_not(
    three_panels: list[dict[str, Any]],
) -> None:
    fig = plots._build_lightcurve_figure(three_panels, time_label=TIME_LABEL)
    r, gamma, xray = fig.axes
    assert r.yaxis_inverted()  # brighter (smaller magnitude) up
    assert not gamma.yaxis_inverted() and not xray.yaxis_inverted()
    bottom, top = r.get_ylim()
    assert bottom > top


@pytest.mark.parametrize(
    ("ratio", "scale"),
    [(1000.0, "log"), (150.0, "log"), (100.0, "linear"), (50.0, "linear"), (1.5, "linear")],
)
def test_flux_axis_is_logarithmic_beyond_two_decades(ratio: float, scale: str) -> None:
    values = np.geomspace(1e-3, 1e-3 * ratio, 12)
    fig = plots._build_lightcurve_figure(
        [_panel("v", "mJy", values)], time_label=TIME_LABEL, width_px=600
    )
    assert fig.axes[0].get_yscale() == scale


def test_negative_fluxes_do_not_count_towards_the_log_decision() -> None:
    values = np.array([-5.0, -1.0, 1.0, 2.0, 5.0])  # positive span: half a decade
    fig = plots._build_lightcurve_figure([_panel("v", "mJy", values)], time_label=TIME_LABEL)
    assert fig.axes[0].get_yscale() == "linear"


def test_magnitudes_never_get_a_log_axis() -> None:
    values = np.array([0.1, 5.0, 25.0])  # > 2 decades as numbers, but magnitudes
    fig = plots._build_lightcurve_figure(
        [_panel("v", "ABmag", values, is_magnitude=True)], time_label=TIME_LABEL
    )
    ax = fig.axes[0]
    assert ax.get_yscale() == "linear" and ax.yaxis_inverted()
    assert ax.get_ylabel() == "magnitude (AB)"


def test_upper_limits_are_downward_arrows_and_not_detections(
    three_panels: list[dict[str, Any]],
) -> None:
    fig = plots._build_lightcurve_figure(three_panels, time_label=TIME_LABEL)
    gamma_ax = fig.axes[1]
    lines = {ln.get_gid(): ln for ln in gamma_ax.get_lines() if ln.get_gid()}
    limits = three_panels[1]["upper_limit"]
    arrows = lines["upper-limits-1"]
    assert arrows.get_marker() is plots.LIMIT_MARKER
    np.testing.assert_array_equal(arrows.get_xdata(), three_panels[1]["time"][limits])
    np.testing.assert_array_equal(arrows.get_ydata(), three_panels[1]["value"][limits])
    # the marker is anchored at the limit (its bar, y = 0) and extends below it on screen
    verts = MarkerStyle(plots.LIMIT_MARKER).get_path().vertices
    assert verts[:, 1].max() == pytest.approx(0.0) and verts[:, 1].min() < 0
    detections = lines["detections-1"]
    assert len(detections.get_xdata()) == int((~limits).sum())
    # panels without limits have no arrows
    assert not any(ln.get_gid() == "upper-limits-0" for ln in fig.axes[0].get_lines())


def test_axes_are_labelled_with_units_and_time_system(
    three_panels: list[dict[str, Any]],
) -> None:
    fig = plots._build_lightcurve_figure(three_panels, time_label=TIME_LABEL)
    r, gamma, xray = fig.axes
    assert r.get_ylabel() == "magnitude"
    assert gamma.get_ylabel() == "photon flux (ph / (cm² s))"
    assert xray.get_ylabel() == "count rate (ct / s)"
    assert xray.get_xlabel() == TIME_LABEL
    assert r.get_xlabel() == "" and gamma.get_xlabel() == ""  # one shared time axis
    assert r.get_shared_x_axes().joined(r, xray)
    formatter = xray.xaxis.get_major_formatter()
    assert formatter.get_useOffset() is False  # 60012.5, never "+6e4"
    colours = {
        ln.get_color() for ax in fig.axes for ln in ax.get_lines() if "detect" in ln.get_gid()
    }
    assert len(colours) == 3  # one colour per band


def test_missing_and_negative_errors_and_empty_panels_draw_quietly() -> None:
    """Warnings are errors in this suite: NaN errors, no errors, no points all render."""
    panels = [
        _panel("v", "mJy", np.array([1.0, 2.0, np.nan]), error=np.array([np.nan, -1.0, 0.1])),
        {**_panel("r", "mJy", np.zeros(0)), "error": None, "upper_limit": None},
    ]
    png = plots.lightcurve_figure(panels, time_label=TIME_LABEL, fmt="png", width_px=500)
    with Image.open(io.BytesIO(png)) as im:
        assert im.size == (500, plots.lightcurve_height(2))


@pytest.mark.parametrize(
    ("call", "match"),
    [
        (lambda: plots.lightcurve_figure([], time_label="t", fmt="png"), "at least one panel"),
        (
            lambda: plots.lightcurve_figure(
                [_panel("v", "mJy", np.ones(3))], time_label="t", fmt="pdf"
            ),
            "fmt must be 'png' or 'svg'",
        ),
        (
            lambda: plots.lightcurve_figure(
                [{**_panel("v", "mJy", np.ones(3)), "error": np.ones(2)}], time_label="t", fmt="png"
            ),
            "differ in length",
        ),
        (
            lambda: plots.lags_figure([0, 1], [0.1, 0.2], np.ones((3, 2)), method="dcf", fmt="png"),
            r"shape \(2, len\(lag\)\)",
        ),
    ],
)
def test_bad_input_is_refused(call: Any, match: str) -> None:
    with pytest.raises(ValueError, match=match):
        call()


def test_correlation_figure_log_axes_and_fitted_power_law() -> None:
    rng = np.random.default_rng(3)
    x = np.geomspace(0.5, 20.0, 30)
    y = 1e-7 * x**1.4 * 10 ** rng.normal(0, 0.03, x.size)
    x[0] = -1.0  # a non-positive flux cannot be shown on log axes
    fig = plots._build_correlation_figure(
        x, y, x_label="r (mJy)", y_label="gamma (ph / (cm2 s))", slope=1.4, intercept=-7.0
    )
    ax = fig.axes[0]
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    lines = {ln.get_gid(): ln for ln in ax.get_lines()}
    assert len(lines["pairs"].get_xdata()) == 29
    fit = lines["fit"]
    xs = np.asarray(fit.get_xdata())
    # log10 F_y = intercept + slope log10 F_x, recomputed with numpy
    np.testing.assert_allclose(fit.get_ydata(), 10 ** (-7.0 + 1.4 * np.log10(xs)), rtol=1e-12)
    assert xs.min() == pytest.approx(x[1:].min()) and xs.max() == pytest.approx(x.max())
    assert any("not shown" in t.get_text() for t in ax.texts)
    png = plots.correlation_figure(
        x, y, x_label="r", y_label="g", slope=1.4, intercept=-7.0, fmt="png", width_px=640
    )
    with Image.open(io.BytesIO(png)) as im:
        assert im.size == (640, 560)
    svg = plots.correlation_figure(
        x, y, x_label="r", y_label="g", slope=None, intercept=None, fmt="svg"
    )
    assert _svg_axes_groups(svg) == ["axes_1"] and "fit" not in _svg_ids(svg)


def test_lags_figure_errors_levels_and_sign_convention() -> None:
    lag = np.arange(-10.0, 10.5, 1.0)
    coef = np.exp(-(((lag - 2) / 3) ** 2))
    coef[0] = np.nan  # an empty lag bin
    err = np.vstack([np.full(lag.size, 0.05), np.full(lag.size, 0.1)])  # asymmetric (ZDCF)
    levels = {"95": np.full(lag.size, 0.5), "99": np.full(lag.size, 0.7)}
    fig = plots._build_lags_figure(
        lag, coef, err, method="zdcf", levels=levels, peak=2.0, centroid=2.2
    )
    ax = fig.axes[0]
    assert ax.get_xlabel() == "lag (d); > 0: y lags x"
    assert ax.get_ylabel() == "ZDCF coefficient"
    lines = {ln.get_gid(): ln for ln in ax.get_lines() if ln.get_gid()}
    assert len(lines["coefficient"].get_xdata()) == lag.size - 1
    np.testing.assert_array_equal(lines["level-95"].get_ydata(), levels["95"])
    np.testing.assert_array_equal(lines["level-99"].get_ydata(), levels["99"])
    assert lines["peak"].get_xdata()[0] == 2.0 and lines["centroid"].get_xdata()[0] == 2.2
    # the error bars are the asymmetric ones given: the segment of lag 0 spans coef - 0.05 .. + 0.1
    segments = [s for coll in ax.collections for s in coll.get_segments()]
    at_zero = [s for s in segments if np.allclose(s[:, 0], 0.0)]
    assert len(at_zero) == 1
    i0 = int(np.flatnonzero(lag == 0.0)[0])
    np.testing.assert_allclose(sorted(at_zero[0][:, 1]), [coef[i0] - 0.05, coef[i0] + 0.1])
    named = plots._build_lags_figure(lag, coef, None, method="dcf", x_name="r", y_name="gamma")
    assert named.axes[0].get_xlabel() == "lag (d); > 0: gamma lags r"
    svg = plots.lags_figure(lag, coef, err[0], method="dcf", levels=levels, fmt="svg")
    assert _svg_axes_groups(svg) == ["axes_1"]
    assert {"level-95", "level-99"} <= _svg_ids(svg)
    png = plots.lags_figure(lag, coef, err[0], method="dcf", fmt="png", width_px=900, height_px=420)
    with Image.open(io.BytesIO(png)) as im:
        assert im.size == (900, 420)


def test_plots_import_without_django_or_pyplot() -> None:
    """No Django, and no pyplot (no global backend state) in a fresh interpreter."""
    code = (
        "import sys, lcstore.plots\n"
        "bad = sorted(k for k in sys.modules if k.split('.')[0] in ('django', 'rest_framework')"
        " or k == 'matplotlib.pyplot')\n"
        "print(bad)\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True
    )
    assert out.stdout.strip() == "[]"


def test_tiny_linear_fluxes_carry_their_power_of_ten_in_the_label() -> None:
    """No offset text above a panel: 3e-11 erg/(cm2 s) reads 3 on a "10⁻¹¹" axis."""
    values = np.array([1e-11, 2e-11, 3e-11])
    fig = plots._build_lightcurve_figure(
        [_panel("xray", "erg / (cm2 s)", values)], time_label=TIME_LABEL
    )
    ax = fig.axes[0]
    assert ax.get_yscale() == "linear"
    assert ax.get_ylabel() == "energy flux (10⁻¹¹ erg / (cm² s))"
    assert ax.yaxis.get_major_formatter()(3e-11, 0) == "3"
