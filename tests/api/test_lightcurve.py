"""Light curves out: units, binning, merging with calibration offsets, formats, as_of.

References named beside each check: REFERENCES §1 (Vega/AB zero points, the
15.0/16.0 mag flux average), §2 (power law, recomputed with scipy.integrate.quad),
§4 (binning: Bevington & Robinson; astropy aggregate_downsample; bayesian_blocks),
§6 (extinction package table).
"""

from __future__ import annotations

import io
import json

import extinction
import numpy as np
import pytest
from astropy import units as u
from astropy.io import ascii as astro_ascii
from astropy.io.votable import parse_single_table
from astropy.stats import bayesian_blocks
from scipy.integrate import quad

from lcstore.models import CalibrationOffset, HostFlux, Instrument

pytestmark = pytest.mark.django_db


@pytest.fixture
def loaded(catalogue, contributor, client_for, upload_file):
    """R band from two telescopes (one offset by a factor), and gamma-ray points."""
    c = client_for(contributor)
    second = Instrument.objects.create(
        slug="fern-0p6",
        name="Fern 0.6 m",
        kind="ground",
        site_lon=10.0,
        site_lat=45.0,
        site_height=500.0,
        default_time_format="mjd",
        default_time_scale="tdb",
        default_time_reference="BARYCENTER",
    )
    r1 = "time,value,error\n60000.1,1.0,0.1\n60000.2,1.2,0.2\n60000.3,0.8,0.1\n60001.1,2.0,0.1\n"
    r2 = "time,value,error\n60001.6,2.2,0.1\n60002.5,3.0,0.3\n"
    base = dict(
        source="tarn-7",
        band="r",
        value_unit="mJy",
        time_format="mjd",
        time_scale="tdb",
        time_reference="BARYCENTER",
    )
    assert upload_file(c, r1, "r1.csv", instrument="hollow-hill-1m", **base).status_code == 201
    assert upload_file(c, r2, "r2.csv", instrument=second.slug, **base).status_code == 201
    g = "time,value,error,upper_limit\n60000.5,1e-6,1e-7,0\n60001.5,2e-6,2e-7,0\n60002.5,5e-7,,1\n"
    assert (
        upload_file(
            c,
            g,
            "g.csv",
            band="gamma",
            source="tarn-7",
            instrument="wren-lat",
            value_unit="ph/(cm2 s)",
            time_format="mjd",
            time_scale="tdb",
            time_reference="BARYCENTER",
        ).status_code
        == 201
    )
    return {"client": c, "second": second}


def test_binned_r_band_matches_references(loaded):
    c = loaded["client"]
    r = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r&bin=1d")
    assert r.status_code == 200, r.json()
    rows = r.json()["rows"]
    # REFERENCES §4 oracle example (astropy aggregate_downsample of w and wf):
    # [0.93333, 2.1, 3.0] +/- [0.066667, 0.070711, 0.3]
    np.testing.assert_allclose([x["value"] for x in rows], [0.933333, 2.1, 3.0], rtol=1e-5)
    np.testing.assert_allclose([x["error"] for x in rows], [0.0666667, 0.0707107, 0.3], rtol=1e-5)
    assert [x["n"] for x in rows] == [3, 2, 1]
    assert [x["time_lo"] for x in rows] == [60000.0, 60001.0, 60002.0]
    assert [x["time"] for x in rows] == [60000.5, 60001.5, 60002.5]


def test_calibration_offset_applies_at_query_time(loaded, catalogue):
    """A curator's offset changes merged answers at once, without a re-upload."""
    c = loaded["client"]
    CalibrationOffset.objects.create(instrument=loaded["second"], band=catalogue["r"], factor=0.5)
    rows = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r").json()["rows"]
    by_inst = {(x["instrument"], x["time"]): x["value"] for x in rows}
    assert by_inst[("fern-0p6", 60001.6)] == pytest.approx(1.1)
    assert by_inst[("hollow-hill-1m", 60001.1)] == pytest.approx(2.0)


def test_magnitudes_are_averaged_in_flux(catalogue, contributor, client_for, upload_file):
    """REFERENCES §1: 15.0 and 16.0 mag averaged in flux = 15.3887 mag, not 15.5."""
    c = client_for(contributor)
    r = upload_file(
        c,
        "time,value\n60000.2,15.0\n60000.4,16.0\n",
        "m.csv",
        source="tarn-7",
        band="v",
        instrument="hollow-hill-1m",
        value_unit="mag",
        time_format="mjd",
        time_scale="tdb",
        time_reference="BARYCENTER",
    )
    assert r.status_code == 201
    rows = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=v&bin=1d&unit=mag").json()["rows"]
    assert rows[0]["value"] == pytest.approx(15.3887, abs=1e-4)


def test_units_abmag_nufnu_and_canonical(loaded):
    c = loaded["client"]
    body = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r&unit=ABmag").json()
    # astropy u.ABmag: 1 mJy = 16.400 AB (REFERENCES §1)
    assert body["rows"][0]["value"] == pytest.approx((1.0 * u.mJy).to(u.ABmag).value)
    body = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=gamma&unit=nufnu").json()
    # nuFnu at the 1 GeV pivot of a Gamma = 2.4 power law normalised to the photon flux
    # (REFERENCES §2), integral with scipy.integrate.quad:
    e1, e2, e0, gam = 1e5, 3e8, 1e6, 2.4
    norm = 1e-6 / quad(lambda e: (e / e0) ** -gam, e1, e2, limit=200)[0]  # per keV
    nufnu = (norm * e0**2 * u.keV / u.cm**2 / u.s).to(u.erg / u.cm**2 / u.s).value
    assert body["rows"][0]["value"] == pytest.approx(nufnu, rel=1e-6)
    assert body["bands"][0]["unit"].replace(" ", "") in (
        "erg/(cm2s)",
        "ergcm-2s-1",
        "erg/(s cm2)".replace(" ", ""),
    )
    body = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r,gamma&unit=Jy,ph/(cm2 s)").json()
    assert body["rows"][0]["value"] == pytest.approx(1e-3)


def test_impossible_conversions_answer_400(loaded):
    c = loaded["client"]
    r = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=gamma&unit=mag")
    assert r.status_code == 400 and "gamma" in r.json()["detail"]
    r = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r,gamma&unit=mJy,Jy,Jy")
    assert r.status_code == 400
    r = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=nope")
    assert r.status_code == 400 and "nope" in r.json()["detail"]
    r = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r&bin=0.000000001&format=csv")
    assert r.status_code == 400 and r["Content-Type"].startswith("application/json")
    r = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=gamma&deredden=true")
    assert r.status_code == 400


def test_limits_only_bin_and_exclusion(loaded):
    c = loaded["client"]
    rows = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=gamma&bin=1d").json()["rows"]
    assert rows[-1]["upper_limit"] is True and rows[-1]["value"] == pytest.approx(5e-7)
    rows = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=gamma&upper_limits=exclude").json()[
        "rows"
    ]
    assert all(not x["upper_limit"] for x in rows) and len(rows) == 2


def test_csv_columns_exactly_as_designed(loaded):
    c = loaded["client"]
    r = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r&format=csv")
    text = b"".join(r.streaming_content).decode()
    assert text.splitlines()[0] == "band,time,value,error,upper_limit,instrument,upload"
    assert text.splitlines()[1].startswith("r,60000.1,1.0,0.1,false,hollow-hill-1m,")
    r = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r&bin=1d&format=csv")
    text = r.content.decode()  # binned answers are small: one body (and cacheable)
    assert text.splitlines()[0] == "band,time,time_lo,time_hi,value,error,upper_limit,n"


def test_ecsv_and_votable_read_back_with_astropy(loaded):
    c = loaded["client"]
    r = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r&bin=1d&format=ecsv")
    assert r.status_code == 200
    t = astro_ascii.read(r.content.decode(), format="ecsv")
    assert t.colnames == [
        "band",
        "time",
        "time_lo",
        "time_hi",
        "value",
        "error",
        "upper_limit",
        "n",
    ]
    assert t["value"].unit == u.mJy and t["time"].unit == u.d
    assert t.meta["TIMESYS"] == "TDB" and t.meta["TREFPOS"] == "BARYCENTER"
    np.testing.assert_allclose(t["value"], [0.933333, 2.1, 3.0], rtol=1e-5)
    r = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r&format=votable")
    vt = parse_single_table(io.BytesIO(r.content)).to_table()
    assert vt["value"].unit == u.mJy
    assert len(vt) == 6


def test_bayesian_blocks_edges_match_astropy(catalogue, contributor, client_for, upload_file):
    """REFERENCES §4: astropy.stats.bayesian_blocks, fitness 'measures' (Scargle et al. 2013)."""
    rng = np.random.default_rng(0)
    t = 60000 + np.arange(0, 100, 0.5)
    f = np.where(t - 60000 < 50, 1.0, 3.0) + rng.normal(0, 0.1, t.size)
    text = "time,value,error\n" + "\n".join(
        f"{a:.3f},{b:.6f},0.1" for a, b in zip(t, f, strict=True)
    )
    c = client_for(contributor)
    assert (
        upload_file(
            c,
            text,
            "s.csv",
            source="tarn-7",
            band="r",
            instrument="hollow-hill-1m",
            value_unit="mJy",
            time_format="mjd",
            time_scale="tdb",
            time_reference="BARYCENTER",
        ).status_code
        == 201
    )
    rows = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r&bin=blocks&p0=0.01").json()["rows"]
    edges = bayesian_blocks(t, f, 0.1, fitness="measures", p0=0.01)
    assert [x["time_lo"] for x in rows] + [rows[-1]["time_hi"]] == pytest.approx(list(edges))


def test_deredden_and_host(loaded, catalogue):
    c = loaded["client"]
    plain = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r").json()["rows"][0]["value"]
    body = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r&deredden=true").json()
    # extinction package, CCM89 at 6410 A, E(B-V) = 0.1, R_V = 3.1 -> A = 0.2608 (REFERENCES §6)
    a = extinction.ccm89(np.array([6410.0]), 0.31, 3.1)[0]
    assert a == pytest.approx(0.2608, abs=1e-4)
    assert body["rows"][0]["value"] == pytest.approx(plain * 10 ** (0.4 * a))
    HostFlux.objects.create(source=catalogue["source"], band=catalogue["r"], value=0.25)
    body = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r&host=true").json()
    assert body["rows"][0]["value"] == pytest.approx(plain - 0.25)
    assert any("host" in s for s in body["bands"][0]["steps"])


def test_json_answer_has_provenance_and_time_system(loaded):
    body = loaded["client"].get("/api/v1/sources/tarn-7/lightcurve/?bands=r").json()
    assert body["time"] == {
        "format": "mjd",
        "scale": "tdb",
        "reference": "BARYCENTER",
        "description": "MJD (TDB) at the solar-system barycentre (BJD_TDB - 2400000.5)",
    }
    assert {p["uploader"] for p in body["provenance"]["uploads"]} == {"ada"}
    assert json.dumps(body)  # NaN never leaks into JSON


def test_time_formats_out(loaded):
    """JD = MJD + 2400000.5 (REFERENCES §3); isot strings as astropy writes them (TDB)."""
    from astropy.time import Time

    c = loaded["client"]
    mjd = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r").json()["rows"]
    jd = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r&time_format=jd").json()
    assert jd["time"]["format"] == "jd"
    assert [x["time"] for x in jd["rows"]] == pytest.approx([x["time"] + 2400000.5 for x in mjd])
    iso = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r&time_format=isot").json()["rows"]
    assert iso[0]["time"] == Time(mjd[0]["time"], format="mjd", scale="tdb").isot


def test_schema_and_docs_are_served(loaded):
    c = loaded["client"]
    r = c.get("/api/v1/schema/?format=json")
    assert r.status_code == 200
    paths = r.json()["paths"]
    for p in (
        "/api/v1/sources/{slug}/lightcurve/",
        "/api/v1/uploads/",
        "/api/v1/jobs/",
        "/api/v1/sources/{slug}/lags/",
    ):
        assert p in paths
    assert c.get("/api/v1/docs/").status_code == 200


def test_cached_answers_follow_new_data(loaded, contributor, upload_file):
    """A cached binned answer is served again only while the data is unchanged."""
    c = loaded["client"]
    url = "/api/v1/sources/tarn-7/lightcurve/?bands=r&bin=1d&format=csv"
    first = c.get(url)
    again = c.get(url)
    assert first["X-Lcstore-Cache"] == "miss" and again["X-Lcstore-Cache"] == "hit"
    assert again.content == first.content
    r = upload_file(
        c,
        "time,value,error\n60005.5,9.0,0.1\n",
        "late.csv",
        source="tarn-7",
        band="r",
        instrument="hollow-hill-1m",
        value_unit="mJy",
        time_format="mjd",
        time_scale="tdb",
        time_reference="BARYCENTER",
    )
    assert r.status_code == 201
    after = c.get(url)
    assert after["X-Lcstore-Cache"] == "miss"
    assert after.content.decode().splitlines()[-1].startswith("r,60005.5,")
    c.post(f"/api/v1/uploads/{r.json()['id']}/retract/", {"reason": "test"}, format="json")
    assert c.get(url).content == first.content


def test_png_and_svg_plots(loaded):
    """Plots read back with Pillow and an XML parser: one panel per band."""
    import xml.etree.ElementTree as ET

    from PIL import Image

    c = loaded["client"]
    r = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r,gamma&bin=1d&format=png")
    assert r.status_code == 200 and r["Content-Type"] == "image/png"
    img = Image.open(io.BytesIO(r.content))
    assert img.width == 1000
    r = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r,gamma&unit=nufnu&format=svg")
    root = ET.fromstring(r.content)
    ids = {el.get("id") for el in root.iter() if el.get("id", "").startswith("axes_")}
    assert ids == {"axes_1", "axes_2"}


def test_as_of_uses_the_calibration_offset_valid_then(loaded, catalogue, curator, client_for):
    """An offset added later does not change an as_of answer from before it existed."""
    import time

    from django.utils import timezone

    c = loaded["client"]
    before = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r").json()["rows"]
    moment = timezone.now().isoformat()
    time.sleep(0.01)
    r = client_for(curator).post(
        "/api/v1/calibration-offsets/",
        {"instrument": "fern-0p6", "band": "r", "factor": 0.5},
        format="json",
    )
    assert r.status_code == 201
    now = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r").json()["rows"]
    then = c.get("/api/v1/sources/tarn-7/lightcurve/", {"bands": "r", "as_of": moment}).json()
    assert then["rows"] == before
    assert now != before


def test_every_query_parameter_has_an_example(loaded):
    """OpenAPI 3: every documented parameter carries a description and an example."""
    schema = loaded["client"].get("/api/v1/schema/?format=json").json()
    missing = [
        (path, p["name"])
        for path, item in schema["paths"].items()
        for op in item.values()
        if isinstance(op, dict)
        for p in op.get("parameters", [])
        if ("example" not in p and "examples" not in p) or not p.get("description")
    ]
    assert missing == []
