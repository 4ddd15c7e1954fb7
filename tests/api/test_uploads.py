"""Uploads over HTTP: formats, conversions, every validation error, atomicity, 409, retraction.

Reference values (named beside each check):
- Vega zero points: Bessell, Castelli & Plez 1998, Table A2 (REFERENCES §1);
- BJD_TDB worked example: REFERENCES §3, recomputed with astropy;
- power law photon -> energy flux: REFERENCES §2, recomputed with scipy.integrate.quad.
"""

from __future__ import annotations

import io
import json

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import EarthLocation, SkyCoord
from astropy.io import fits
from astropy.table import Table
from astropy.time import Time

from lcstore.models import FluxPoint, StoredFile, Upload

pytestmark = pytest.mark.django_db

OPTICAL_CSV = """# Hollow Hill nightly photometry, R band
# columns: JD (UTC), magnitude, error
jd,mag,err
2460000.0,14.00,0.02
2460001.0,14.10,0.02
2460002.0,13.90,0.03
"""


def _bjd_reference(jd_utc: np.ndarray) -> np.ndarray:
    """BJD_TDB as MJD with astropy directly (REFERENCES §3 recipe)."""
    site = EarthLocation.from_geodetic(-70.7 * u.deg, -30.2 * u.deg, 2200 * u.m)
    t = Time(jd_utc, format="jd", scale="utc", location=site)
    coord = SkyCoord(150 * u.deg, 20 * u.deg)
    bjd = t.tdb + t.light_travel_time(coord, kind="barycentric")
    return bjd.mjd


def _upload_optical(client, upload_file, **fields):
    """OPTICAL_CSV as a night of R magnitudes of tarn-7, plus ``fields``."""
    return upload_file(
        client,
        OPTICAL_CSV,
        "r-night.csv",
        source="tarn-7",
        band="r",
        instrument="hollow-hill-1m",
        columns=json.dumps({"time": "jd", "value": "mag", "error": "err"}),
        value_unit="mag",
        **fields,
    )


def test_csv_upload_converts_vega_magnitudes_and_times(
    catalogue, contributor, client_for, upload_file
):
    c = client_for(contributor)
    r = _upload_optical(c, upload_file, reduction="aperture 5 arcsec", reference="invented 2026")
    assert r.status_code == 201, r.json()
    body = r.json()
    assert body["counts"] == {"rows": 3, "points": 3, "upper_limits": 0, "detections": 3}
    assert body["time_format"] == "jd" and body["time_scale"] == "utc"
    assert body["parameters"]["metadata"]["bands"]["r"]["zero_point_jy"] == 3064.0
    pts = FluxPoint.objects.filter(upload_id=body["id"]).order_by("t")
    values = np.array([p.value for p in pts])
    # Bessell et al. 1998 Table A2: R zero point 3064 Jy; R = 14 -> 7.6964 mJy (REFERENCES §1).
    np.testing.assert_allclose(values[0], 7.6964, rtol=1e-4)
    np.testing.assert_allclose(values, 3064e3 * 10 ** (-0.4 * np.array([14.0, 14.1, 13.9])))
    # first-order error propagation sigma_F = F * 0.4 ln 10 * sigma_m
    np.testing.assert_allclose(pts[0].error, values[0] * 0.4 * np.log(10) * 0.02, rtol=1e-9)
    # REFERENCES §3 worked example: JD 2460000.5 UTC at this site -> BJD_TDB 2460000.50641384;
    # here the three nights, against astropy's own recipe.
    np.testing.assert_allclose(
        [p.t for p in pts],
        _bjd_reference(np.array([2460000.0, 2460001.0, 2460002.0])),
        rtol=0,
        atol=1e-8,
    )
    assert [p.time_orig for p in pts] == [2460000.0, 2460001.0, 2460002.0]
    assert [p.value_orig for p in pts] == [14.0, 14.1, 13.9]


def test_worked_bjd_example_through_upload(catalogue, contributor, client_for, upload_file):
    """REFERENCES §3: UTC MJD 60000.0, RA 150, Dec +20, site (-70.7, -30.2, 2200 m)."""
    c = client_for(contributor)
    r = upload_file(
        c,
        "time,value,error\n60000.0,1.0,0.1\n",
        "one.csv",
        source="tarn-7",
        band="r",
        instrument="hollow-hill-1m",
        value_unit="mJy",
        time_format="mjd",
    )
    assert r.status_code == 201, r.json()
    p = FluxPoint.objects.get(upload_id=r.json()["id"])
    assert p.t + 2400000.5 == pytest.approx(2460000.50641384, abs=1e-8)


def test_the_answer_times_each_stage_of_the_upload(catalogue, contributor, client_for, upload_file):
    """Server-Timing (W3C Server Timing): ``name;dur=ms`` entries, the stages in order, and
    the stages add up to the total (to the 0.1 ms each entry is rounded to)."""
    r = _upload_optical(client_for(contributor), upload_file)
    assert r.status_code == 201, r.json()
    entries = [e.strip().split(";dur=") for e in r.headers["Server-Timing"].split(",")]
    names = [name for name, _ in entries]
    assert names == ["body", "head", "lock", "copy", "store", "answer", "total"]
    ms = [float(d) for _, d in entries]
    assert min(ms) >= 0 and ms[-1] > 0
    assert sum(ms[:-1]) == pytest.approx(ms[-1], abs=0.05 * len(ms))


def test_fits_gamma_upload_reads_time_keywords(catalogue, contributor, client_for, upload_file):
    """REFERENCES §3: TIME=0, TIMESYS=TT, MJDREFI=51910, MJDREFF=7.4287037e-4 is 2001-01-01 UTC.

    Photon flux of a power-law band stored as is (canonical ph cm^-2 s^-1).
    """
    t = Table(
        {
            "TIME": [0.0, 86400.0],
            "FLUX": [1e-6, 2e-6],
            "FLUX_ERR": [1e-7, 2e-7],
            "UL": [False, True],
        }
    )
    hdu = fits.table_to_hdu(t)
    hdu.header["TIMESYS"] = "TT"
    hdu.header["MJDREFI"] = 51910
    hdu.header["MJDREFF"] = 7.428703703703703e-4
    hdu.header["TIMEUNIT"] = "s"
    hdu.header["TREFPOS"] = "GEOCENTER"
    hdu.columns["FLUX"].unit = "ph/(cm2 s)"
    buf = io.BytesIO()
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(buf)
    c = client_for(contributor)
    r = upload_file(
        c,
        buf.getvalue(),
        "gamma.fits",
        source="tarn-7",
        band="gamma",
        instrument="wren-lat",
        columns=json.dumps(
            {"time": "TIME", "value": "FLUX", "error": "FLUX_ERR", "upper_limit": "UL"}
        ),
    )
    assert r.status_code == 201, r.json()
    body = r.json()
    assert body["time_format"] == "met" and body["time_scale"] == "tt"
    assert body["counts"]["upper_limits"] == 1
    first = FluxPoint.objects.filter(upload_id=body["id"]).order_by("t").first()
    # astropy: 2001-01-01T00:00:00 UTC at the geocentre, then to the barycentre.
    t0 = Time("2001-01-01T00:00:00", scale="utc")
    coord = SkyCoord(150 * u.deg, 20 * u.deg)
    expected = t0.tdb + t0.light_travel_time(
        coord, kind="barycentric", location=EarthLocation.from_geocentric(0, 0, 0, u.m)
    )
    assert first.t == pytest.approx(expected.mjd, abs=1e-9)
    assert first.value == pytest.approx(1e-6)


def test_every_bad_row_is_listed_and_nothing_stored(
    catalogue, contributor, client_for, upload_file
):
    bad = (
        "time,value,error\n"
        "60000.0,1.0,0.1\n"
        "60001.0,abc,0.1\n"  # line 3: value not a number
        "60002.0,1.0,-0.1\n"  # line 4: negative error
        "60003.0,1.0,0\n"  # line 5: zero error
        "60004.0,inf,0.1\n"  # line 6: infinite
        "99999999,1.0,0.1\n"  # line 7: absurd time
        "60005.0,,0.1\n"  # line 8: missing value
    )
    c = client_for(contributor)
    r = upload_file(
        c,
        bad,
        "bad.csv",
        source="tarn-7",
        band="r",
        instrument="hollow-hill-1m",
        value_unit="mJy",
        time_format="mjd",
    )
    assert r.status_code == 400
    body = r.json()
    got = {(e["row"], e["column"], e["message"].split(" (")[0]) for e in body["errors"]}
    assert (3, "value", "value is not a number") in got
    assert (4, "error", "error must be positive") in got
    assert (5, "error", "error must be positive") in got
    assert (6, "value", "value is infinite") in got
    assert any(row == 7 and col == "time" and "plausible" in msg for row, col, msg in got)
    assert (8, "value", "value is missing") in got
    assert body["n_errors"] == 6
    assert "nothing was stored" in body["detail"]
    assert Upload.objects.count() == 0 and FluxPoint.objects.count() == 0
    assert StoredFile.objects.count() == 0


def test_unknown_band_in_column_and_missing_column(catalogue, contributor, client_for, upload_file):
    c = client_for(contributor)
    text = "time,value,error,band\n60000,1,0.1,r\n60001,1,0.1,zz\n"
    r = upload_file(
        c,
        text,
        "b.csv",
        source="tarn-7",
        instrument="hollow-hill-1m",
        value_unit="mJy",
        time_format="mjd",
    )
    assert r.status_code == 400
    assert r.json()["errors"] == [{"row": 3, "column": "band", "message": "unknown band 'zz'"}]
    r = upload_file(
        c,
        "t,value\n60000,1\n",
        "c.csv",
        source="tarn-7",
        band="r",
        instrument="hollow-hill-1m",
        value_unit="mJy",
        time_format="mjd",
    )
    assert r.status_code == 400
    assert r.json()["errors"][0]["column"] == "time"
    assert "no time column" in r.json()["errors"][0]["message"]


def test_impossible_unit_is_refused(catalogue, contributor, client_for, upload_file):
    c = client_for(contributor)
    r = upload_file(
        c,
        "time,value\n60000,14\n",
        "m.csv",
        source="tarn-7",
        band="gamma",
        instrument="wren-lat",
        value_unit="mag",
        time_format="mjd",
        time_scale="tt",
    )
    assert r.status_code == 400
    assert "gamma" in r.json()["errors"][0]["message"]


def test_bad_row_at_the_end_of_a_large_file_leaves_nothing(
    catalogue, contributor, client_for, upload_file
):
    n = 200_000
    t = 60000 + np.arange(n) * 0.001
    lines = "\n".join(f"{a:.6f},1.0,0.1" for a in t)
    text = "time,value,error\n" + lines + "\n60300.0,1.0,0.0\n"
    c = client_for(contributor)
    r = upload_file(
        c,
        text,
        "big.csv",
        source="tarn-7",
        band="r",
        instrument="hollow-hill-1m",
        value_unit="mJy",
        time_format="mjd",
    )
    assert r.status_code == 400
    assert r.json()["errors"] == [
        {"row": n + 2, "column": "error", "message": "error must be positive"}
    ]
    assert FluxPoint.objects.count() == 0 and Upload.objects.count() == 0


def test_same_bytes_same_source_is_409_naming_the_upload(
    catalogue, contributor, client_for, upload_file
):
    c = client_for(contributor)
    args = dict(
        source="tarn-7",
        band="r",
        instrument="hollow-hill-1m",
        value_unit="mag",
        columns=json.dumps({"time": "jd", "value": "mag", "error": "err"}),
    )
    first = upload_file(c, OPTICAL_CSV, "r.csv", **args)
    assert first.status_code == 201
    again = upload_file(c, OPTICAL_CSV, "r-again.csv", **args)
    assert again.status_code == 409
    assert again.json()["existing_upload"] == first.json()["id"]
    assert str(first.json()["id"]) in again.json()["detail"]
    assert FluxPoint.objects.count() == 3


def test_original_file_is_kept_byte_for_byte(catalogue, contributor, client_for, upload_file):
    c = client_for(contributor)
    r = upload_file(
        c,
        OPTICAL_CSV,
        "r.csv",
        source="tarn-7",
        band="r",
        instrument="hollow-hill-1m",
        value_unit="mag",
        columns=json.dumps({"time": "jd", "value": "mag", "error": "err"}),
    )
    f = c.get(f"/api/v1/uploads/{r.json()['id']}/file/")
    assert f.status_code == 200
    assert b"".join(f.streaming_content if f.streaming else [f.content]) == OPTICAL_CSV.encode()


def test_retraction_and_supersession_keep_the_old_state(
    catalogue, contributor, other_contributor, curator, client_for, upload_file
):
    c = client_for(contributor)
    base = dict(
        source="tarn-7", band="r", instrument="hollow-hill-1m", value_unit="mJy", time_format="mjd"
    )
    a = upload_file(c, "time,value,error\n60000,1.0,0.1\n60001,2.0,0.1\n", "a.csv", **base)
    assert a.status_code == 201
    a_id = a.json()["id"]
    before = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r&format=json").json()
    assert [row["value"] for row in before["rows"]] == [1.0, 2.0]
    moment = Upload.objects.get(pk=a_id).created_at.isoformat()

    b = upload_file(
        c, "time,value,error\n60000,1.5,0.1\n60001,2.5,0.1\n", "b.csv", supersedes=a_id, **base
    )
    assert b.status_code == 201
    now = c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r").json()
    assert [row["value"] for row in now["rows"]] == [1.5, 2.5]
    then = c.get("/api/v1/sources/tarn-7/lightcurve/", {"bands": "r", "as_of": moment}).json()
    assert [row["value"] for row in then["rows"]] == [1.0, 2.0]
    assert c.get(f"/api/v1/uploads/{a_id}/").json()["status"] == "superseded"
    assert c.get(f"/api/v1/uploads/{a_id}/").json()["superseded_by"] == b.json()["id"]

    # another contributor may not retract it; the owner may, with a reason
    other = client_for(other_contributor)
    r = other.post(f"/api/v1/uploads/{b.json()['id']}/retract/", {"reason": "mine?"}, format="json")
    assert r.status_code == 403
    r = c.post(f"/api/v1/uploads/{b.json()['id']}/retract/", {}, format="json")
    assert r.status_code == 400
    r = c.post(
        f"/api/v1/uploads/{b.json()['id']}/retract/", {"reason": "wrong aperture"}, format="json"
    )
    assert r.status_code == 200
    assert r.json()["status"] == "retracted"
    assert r.json()["retracted_by"] == "ada"
    assert r.json()["retraction_reason"] == "wrong aperture"
    assert c.get("/api/v1/sources/tarn-7/lightcurve/?bands=r").json()["rows"] == []
    # the points are all still there
    assert FluxPoint.objects.count() == 4


def test_upload_permissions(catalogue, reader, contributor, curator, client_for, upload_file):
    text = "time,value\n60000,1.0\n"
    args = dict(
        source="tarn-7", band="r", instrument="hollow-hill-1m", value_unit="mJy", time_format="mjd"
    )
    assert upload_file(client_for(None), text, **args).status_code in (401, 403)
    assert upload_file(client_for(reader), text, **args).status_code == 403
    assert upload_file(client_for(contributor), text, **args).status_code == 201
    r = upload_file(client_for(curator), text + "60001,2\n", **args)
    assert r.status_code == 201
    # a curator may retract any upload
    own = Upload.objects.get(uploader=contributor)
    r = client_for(curator).post(
        f"/api/v1/uploads/{own.pk}/retract/", {"reason": "bad flat"}, format="json"
    )
    assert r.status_code == 200


def test_size_limit_is_413(catalogue, contributor, client_for, upload_file, settings):
    settings.LCSTORE_MAX_UPLOAD_MB = 0
    r = upload_file(
        client_for(contributor),
        "time,value\n60000,1\n" * 100,
        source="tarn-7",
        band="r",
        instrument="hollow-hill-1m",
        value_unit="mJy",
    )
    assert r.status_code == 413
    assert "size limit" in r.json()["detail"]
