"""Correlation, lags, variability, SED and jobs over HTTP.

References named beside each check: scipy.stats (coefficients), scipy.stats.linregress
(OLS slope), Vaughan et al. 2003 example of REFERENCES §5 (F_var), astropy units
(nuFnu at the effective wavelength), and the lag injected in the test data (the
definition of a delayed copy).
"""

from __future__ import annotations

import numpy as np
import pytest
from astropy import units as u
from scipy import stats

from lcstore.models import Instrument, Job
from lcstore.science.simulate import red_noise

pytestmark = pytest.mark.django_db

BARY = dict(time_format="mjd", time_scale="tdb", time_reference="BARYCENTER")


def _csv(t, f, e) -> str:
    return "time,value,error\n" + "\n".join(
        f"{a:.6f},{b:.8g},{c:.8g}" for a, b, c in zip(t, f, e, strict=True)
    )


@pytest.fixture
def two_bands(catalogue, contributor, client_for, upload_file):
    """R band and gamma-ray: gamma = (R/mean)^1.5 × 1e-6, delayed by 5 days."""
    rng = np.random.default_rng(42)
    bary = Instrument.objects.create(
        slug="bary-cam",
        name="Bary camera",
        kind="space",
        default_time_format="mjd",
        default_time_scale="tdb",
        default_time_reference="BARYCENTER",
    )
    n, lag = 400, 5.0
    t = 60000 + np.arange(n, dtype=float)
    logf = red_noise(n + 20, 1.0, 2.0, rng=rng, std=0.3)
    fr = 10 ** logf[10 : n + 10]  # mJy
    shift = int(lag)
    fg = 1e-6 * (10 ** logf[10 - shift : n + 10 - shift] / fr.mean()) ** 1.5
    c = client_for(contributor)
    r1 = upload_file(
        c,
        _csv(t, fr, 0.01 * fr),
        "r.csv",
        source="tarn-7",
        band="r",
        instrument=bary.slug,
        value_unit="mJy",
        **BARY,
    )
    r2 = upload_file(
        c,
        _csv(t, fg, 0.01 * fg),
        "g.csv",
        source="tarn-7",
        band="gamma",
        instrument=bary.slug,
        value_unit="ph/(cm2 s)",
        **BARY,
    )
    assert r1.status_code == 201 and r2.status_code == 201
    return {"client": c, "t": t, "r": fr, "g": fg, "lag": lag}


def test_correlation_of_shared_bins(two_bands):
    c = two_bands["client"]
    body = c.get("/api/v1/sources/tarn-7/correlation/?x=r&y=gamma&bin=1d&n_boot=200").json()
    assert body["n_pairs"] == 400
    x, y = np.array(body["pairs"]["x"]), np.array(body["pairs"]["y"])
    np.testing.assert_allclose(x, two_bands["r"], rtol=1e-6)
    # scipy.stats oracles on the same pairs
    assert body["pearson_r"] == pytest.approx(stats.pearsonr(x, y).statistic)
    assert body["spearman_rho"] == pytest.approx(stats.spearmanr(x, y).statistic)
    assert body["kendall_tau"] == pytest.approx(stats.kendalltau(x, y).statistic)
    ols = stats.linregress(np.log10(x), np.log10(y))
    assert body["slope_ols"] == pytest.approx(ols.slope)
    assert body["slope_ols_error"] == pytest.approx(ols.stderr)
    csv = b"".join(
        c.get("/api/v1/sources/tarn-7/correlation/?x=r&y=gamma&format=csv").streaming_content
    ).decode()
    assert csv.splitlines()[0] == "time_x,time_y,x,y" and len(csv.splitlines()) == 401


def test_lag_recovered_with_sign_convention(two_bands):
    c = two_bands["client"]
    for method in ("dcf", "iccf"):
        body = c.get(
            f"/api/v1/sources/tarn-7/lags/?x=r&y=gamma&method={method}"
            "&lag_min=-20&lag_max=20&lag_step=1"
        ).json()
        # injected: gamma is the R curve delayed by 5 days -> positive lag (y lags x)
        assert body["peak_lag"] == pytest.approx(two_bands["lag"], abs=1.0), method
        assert "y lags behind x" in body["sign_convention"]
    body = c.get(
        "/api/v1/sources/tarn-7/lags/?x=gamma&y=r&method=dcf&lag_min=-20&lag_max=20&lag_step=1"
    ).json()
    assert body["peak_lag"] == pytest.approx(-two_bands["lag"], abs=1.0)
    body = c.get(
        "/api/v1/sources/tarn-7/lags/?x=r&y=gamma&method=zdcf&lag_min=-30&lag_max=30"
    ).json()
    assert body["peak_lag"] == pytest.approx(two_bands["lag"], abs=1.5)
    csv = b"".join(
        c.get(
            "/api/v1/sources/tarn-7/lags/?x=r&y=gamma&lag_min=-5&lag_max=5&lag_step=1&format=csv"
        ).streaming_content
    ).decode()
    assert csv.splitlines()[0] == "lag,coefficient,error,n_pairs"
    assert len(csv.splitlines()) == 12


def test_lag_uncertainty_and_significance(two_bands):
    c = two_bands["client"]
    body = c.get(
        "/api/v1/sources/tarn-7/lags/?x=r&y=gamma&method=dcf&lag_min=-20&lag_max=20"
        "&lag_step=1&n_sim=30&n_sig=20&psd_slope=2"
    ).json()
    unc = body["uncertainty"]["centroid"]
    assert unc["p16"] <= two_bands["lag"] + 1 and unc["p84"] >= two_bands["lag"] - 1
    sig = body["significance"]
    assert all(
        a <= b
        for a, b in zip(sig["level_95"], sig["level_99"], strict=True)
        if a is not None and b is not None
    )
    r = c.get("/api/v1/sources/tarn-7/lags/?x=r&y=gamma&n_sim=100000")
    assert r.status_code == 400


def test_variability_matches_vaughan_example(catalogue, contributor, client_for, upload_file):
    """REFERENCES §5 (Vaughan et al. 2003): f = [10,12,11,13,9,10,14,12], sigma = 0.5
    -> F_var = 0.141462 +/- 0.015912; chi-square p-value from scipy.stats.chi2."""
    f = np.array([10, 12, 11, 13, 9, 10, 14, 12], dtype=float)
    t = 60000 + np.arange(8, dtype=float)
    c = client_for(contributor)
    assert (
        upload_file(
            c,
            _csv(t, f, np.full(8, 0.5)),
            "v.csv",
            source="tarn-7",
            band="r",
            instrument="hollow-hill-1m",
            value_unit="mJy",
            **BARY,
        ).status_code
        == 201
    )
    body = c.get("/api/v1/sources/tarn-7/variability/?bands=r").json()
    b = body["bands"][0]
    assert b["fvar"] == pytest.approx(0.141462, abs=1e-6)
    assert b["fvar_error"] == pytest.approx(0.015912, abs=1e-6)
    chi2 = np.sum((f - f.mean()) ** 2 / 0.25)
    assert b["chi2"] == pytest.approx(chi2)
    assert b["chi2_p"] == pytest.approx(stats.chi2.sf(chi2, 7))


def test_sed_snapshot_nufnu(two_bands):
    c = two_bands["client"]
    body = c.get("/api/v1/sources/tarn-7/sed/?at=60010.0&window=1.0").json()
    rows = {r["band"]: r for r in body["rows"]}
    # astropy: nu F_nu at lambda_eff = 6410 A of the R flux on MJD 60010
    fr = two_bands["r"][10] * u.mJy
    nu = (6410 * u.AA).to(u.Hz, u.spectral())
    assert rows["r"]["nufnu"] == pytest.approx((fr * nu).to_value(u.erg / u.cm**2 / u.s), rel=1e-9)
    assert rows["r"]["frequency_hz"] == pytest.approx(nu.value)
    assert body["rows"][0]["frequency_hz"] < body["rows"][-1]["frequency_hz"]


def test_job_life_from_202_to_result(two_bands, django_capture_on_commit_callbacks, settings):
    settings.TASKS = {"default": {"BACKEND": "django_tasks.backends.immediate.ImmediateBackend"}}
    c = two_bands["client"]
    params = {
        "x": "r",
        "y": "gamma",
        "method": "dcf",
        "lag_min": -10,
        "lag_max": 10,
        "lag_step": 1,
        "n_sim": 10,
    }
    with django_capture_on_commit_callbacks(execute=True):
        r = c.post(
            "/api/v1/jobs/",
            {"kind": "lags", "source": "tarn-7", "parameters": params},
            format="json",
        )
    assert r.status_code == 202
    loc = r["Location"]
    job = c.get(loc).json()
    assert job["state"] == "done" and job["progress"] == 1.0
    sync = c.get("/api/v1/sources/tarn-7/lags/", params).json()
    assert job["result"]["peak_lag"] == sync["peak_lag"]
    assert job["result"]["rows"] == sync["rows"]
    assert Job.objects.count() == 1


def test_correlation_and_lag_plots(two_bands):
    """PNG read back with Pillow; SVG parsed as XML (one axes group)."""
    import io
    import xml.etree.ElementTree as ET

    from PIL import Image

    c = two_bands["client"]
    r = c.get("/api/v1/sources/tarn-7/correlation/?x=r&y=gamma&n_boot=50&format=png")
    assert r.status_code == 200 and r["Content-Type"] == "image/png"
    assert Image.open(io.BytesIO(r.content)).size == (640, 560)
    r = c.get(
        "/api/v1/sources/tarn-7/lags/?x=r&y=gamma&lag_min=-10&lag_max=10&lag_step=1"
        "&n_sig=5&format=svg"
    )
    assert r.status_code == 200
    root = ET.fromstring(r.content)
    assert "axes_1" in {el.get("id") for el in root.iter()}
