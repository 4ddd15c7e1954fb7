"""Curated metadata history and the re-derivation of dependent points (lcstore/rederive.py).

Anchors (named beside each check):
- magnitudes to flux density, m = -2.5 log10(F / ZP) with the band's zero point:
  Bessell, Castelli & Plez 1998, Table A2 for R = 3064 Jy (REFERENCES §1);
- BJD_TDB = t_TDB + light travel time to the barycentre towards the source (Eastman,
  Siverd & Gaudi 2010), recomputed with astropy ``Time.light_travel_time`` (REFERENCES §3);
- history who/when/before/after: django-simple-history's ``history_user``,
  ``history_date`` and ``diff_against``.
"""

from __future__ import annotations

import datetime as dt
import json
from typing import Any

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import EarthLocation, SkyCoord
from astropy.time import Time
from django.utils import timezone

from lcstore.models import Band, CalibrationOffset, FluxPoint, Instrument, Source, Upload

pytestmark = pytest.mark.django_db

OPTICAL_CSV = """# Hollow Hill nightly photometry, R band
jd,mag,err
2460000.0,14.00,0.02
2460001.0,14.10,0.02
2460002.0,13.90,0.03
"""
MAGS = np.array([14.00, 14.10, 13.90])
MAG_ERRS = np.array([0.02, 0.02, 0.03])
SITE = EarthLocation.from_geodetic(-70.7 * u.deg, -30.2 * u.deg, 2200 * u.m)
GEOCENTRE = EarthLocation.from_geocentric(0, 0, 0, u.m)


def _upload_mags(client: Any, upload_file: Any, **extra: Any) -> int:
    """The R-band magnitudes, times in the instrument's default system (JD, UTC, topocentre)."""
    r = upload_file(
        client,
        OPTICAL_CSV,
        "r-night.csv",
        source="tarn-7",
        band="r",
        instrument="hollow-hill-1m",
        columns=json.dumps({"time": "jd", "value": "mag", "error": "err"}),
        value_unit="mag",
        **extra,
    )
    assert r.status_code == 201, r.json()
    return r.json()["id"]


def _csv(client: Any, **query: Any) -> bytes:
    r = client.get("/api/v1/sources/tarn-7/lightcurve/", {"bands": "r", "format": "csv", **query})
    assert r.status_code == 200
    return b"".join(r.streaming_content) if r.streaming else r.content


def _points(upload_id: int) -> list[FluxPoint]:
    return list(FluxPoint.objects.filter(upload_id=upload_id).order_by("t"))


def _latest_two(obj: Any) -> tuple[Any, Any]:
    versions = list(obj.history.order_by("-history_id")[:2])
    return versions[0], versions[1]


def test_zero_point_change_rederives_and_as_of_keeps_the_past(
    catalogue, contributor, curator, client_for, upload_file
):
    c, cur = client_for(contributor), client_for(curator)
    embargo = (timezone.now() + dt.timedelta(days=365)).replace(microsecond=0)
    old_id = _upload_mags(
        c,
        upload_file,
        reduction="aperture 5 arcsec",
        reference="invented 2026",
        embargo_until=embargo.isoformat(),
    )
    old_values = np.array([p.value for p in _points(old_id)])
    moment = timezone.now().isoformat()
    past_before = _csv(c, as_of=moment)
    assert past_before == _csv(c)

    r = cur.patch("/api/v1/bands/r/", {"zero_point_jy": 3100.0}, format="json")
    assert r.status_code == 200, r.json()
    assert r.json()["zero_point_jy"] == 3100.0
    new_id = int(r["X-Lcstore-Rederived"])
    old, new = Upload.objects.get(pk=old_id), Upload.objects.get(pk=new_id)

    # Nothing overwritten: as_of before the change answers byte for byte as before.
    assert _csv(c, as_of=moment) == past_before
    assert FluxPoint.objects.count() == 6
    np.testing.assert_array_equal([p.value for p in _points(old_id)], old_values)

    # The new points: Bessell et al. 1998 relation F = ZP 10^(-0.4 m) with the new ZP,
    # i.e. the old values scaled by 3100/3064; errors scale alike; times unchanged.
    new_pts, old_pts = _points(new_id), _points(old_id)
    new_values = np.array([p.value for p in new_pts])
    np.testing.assert_allclose(new_values, 3100e3 * 10 ** (-0.4 * MAGS), rtol=1e-12)
    np.testing.assert_allclose(new_values / old_values, 3100 / 3064, rtol=1e-12)
    np.testing.assert_allclose(
        [p.error for p in new_pts], new_values * 0.4 * np.log(10) * MAG_ERRS, rtol=1e-12
    )
    assert [p.t for p in new_pts] == [p.t for p in old_pts]
    now_rows = c.get("/api/v1/sources/tarn-7/lightcurve/", {"bands": "r"}).json()["rows"]
    assert [row["upload"] for row in now_rows] == [new_id] * 3
    np.testing.assert_allclose([row["value"] for row in now_rows], new_values, rtol=1e-15)

    # Supersession, with everything of the upload carried over.
    assert old.status == "superseded" and old.superseded_at == new.created_at
    assert new.status == "accepted" and new.supersedes_id == old_id
    assert (new.file_id, new.uploader_id, new.file_name) == (
        old.file_id,
        contributor.pk,
        "r-night.csv",
    )
    assert (new.reduction, new.reference, new.embargo_until) == (
        "aperture 5 arcsec",
        "invented 2026",
        embargo,
    )
    assert (new.columns, new.value_unit, new.time_format, new.time_scale) == (
        old.columns,
        "mag",
        "jd",
        "utc",
    )

    # History: who, when, before and after (django-simple-history).
    band = Band.objects.get(slug="r")
    record, previous = _latest_two(band)
    assert record.history_user == curator
    assert record.history_date == new.created_at
    delta = record.diff_against(previous)
    assert [(ch.field, ch.old, ch.new) for ch in delta.changes] == [
        ("zero_point_jy", 3064.0, 3100.0)
    ]

    # Provenance names the metadata version each upload was derived with.
    body = c.get(f"/api/v1/uploads/{new_id}/").json()
    assert body["parameters"]["rederived"] == {
        "reason": "band r zero_point_jy 3064 -> 3100 by cleo",
        "from_upload": old_id,
        "by": "cleo",
        "at": new.created_at.isoformat(),
        "history": {
            "bands": {
                "r": {
                    "history_id": record.history_id,
                    "previous_history_id": previous.history_id,
                    "changed": ["zero_point_jy"],
                }
            }
        },
    }
    assert body["parameters"]["metadata"]["bands"]["r"]["zero_point_jy"] == 3100.0
    assert body["parameters"]["metadata"]["bands"]["r"]["history_id"] == record.history_id
    assert old.parameters["metadata"]["bands"]["r"]["history_id"] == previous.history_id
    assert c.get(f"/api/v1/uploads/{old_id}/").json()["superseded_by"] == new_id

    # The checksum rule still holds for contributors, now naming the re-derived upload.
    again = upload_file(
        c,
        OPTICAL_CSV,
        "again.csv",
        source="tarn-7",
        band="r",
        instrument="hollow-hill-1m",
        columns=json.dumps({"time": "jd", "value": "mag", "error": "err"}),
        value_unit="mag",
    )
    assert again.status_code == 409 and again.json()["existing_upload"] == new_id


def test_zero_point_reaches_magnitudes_in_the_band_only(
    catalogue, contributor, curator, client_for, upload_file
):
    """A zero point enters magnitudes only (m = -2.5 log10(F/ZP), REFERENCES §1): an upload in
    mJy is left alone; a file with a band column is re-derived whole, its V points unchanged."""
    c = client_for(contributor)
    mags = _upload_mags(c, upload_file)
    common = dict(source="tarn-7", instrument="hollow-hill-1m", time_format="mjd")
    mjy = upload_file(
        c, "time,value,error\n60010,7.7,0.1\n", "r-mjy.csv", band="r", value_unit="mJy", **common
    ).json()["id"]
    mixed = upload_file(
        c,
        "time,value,error,band\n60020,14.0,0.02,r\n60020,15.0,0.02,v\n",
        "rv.csv",
        value_unit="mag",
        **common,
    ).json()["id"]
    v_band = Band.objects.get(slug="v")
    v_before = FluxPoint.objects.get(upload_id=mixed, band=v_band).value

    r = client_for(curator).patch("/api/v1/bands/r/", {"zero_point_jy": 3100.0}, format="json")
    new_ids = [int(i) for i in r["X-Lcstore-Rederived"].split(",")]
    news = {Upload.objects.get(pk=i).supersedes_id: i for i in new_ids}
    assert sorted(news) == [mags, mixed]
    assert Upload.objects.get(pk=mjy).status == "accepted"
    r_new = FluxPoint.objects.get(upload_id=news[mixed], band__slug="r").value
    assert r_new == pytest.approx(3100e3 * 10 ** (-0.4 * 14.0), rel=1e-12)
    # Bessell et al. 1998 Table A2: V zero point 3636 Jy; V = 15 -> 3.636 mJy (REFERENCES §1).
    assert FluxPoint.objects.get(upload_id=news[mixed], band=v_band).value == v_before
    assert v_before == pytest.approx(3.636, rel=1e-4)


def test_source_position_change_shifts_bjd_by_the_light_time_difference(
    catalogue, contributor, curator, client_for, upload_file
):
    """New BJD_TDB - old = light travel time towards the new position - towards the old one,
    both from astropy ``Time.light_travel_time`` at the site (Eastman et al. 2010; REFERENCES §3).
    """
    c = client_for(contributor)
    mjd = np.array([60000.0, 60100.0, 60200.0])
    text = "time,value,error\n" + "".join(f"{m},1.0,0.1\n" for m in mjd)
    base = dict(source="tarn-7", band="r", instrument="hollow-hill-1m", value_unit="mJy")
    topo = upload_file(c, text, "topo.csv", time_format="mjd", **base).json()["id"]
    bary = upload_file(
        c,
        text.replace("1.0,", "2.0,"),
        "bary.csv",
        time_format="mjd",
        time_scale="tdb",
        time_reference="BARYCENTER",
        **base,
    ).json()["id"]
    old_t = np.array([p.t for p in _points(topo)])

    r = client_for(curator).patch(
        "/api/v1/sources/tarn-7/", {"ra": 200.0, "dec": -10.0}, format="json"
    )
    assert r.status_code == 200, r.json()
    new_id = int(r["X-Lcstore-Rederived"])  # one id: barycentric times need no position
    assert Upload.objects.get(pk=bary).status == "accepted"
    new_t = np.array([p.t for p in _points(new_id)])

    t = Time(mjd, format="mjd", scale="utc", location=SITE)
    old_c, new_c = SkyCoord(150 * u.deg, 20 * u.deg), SkyCoord(200 * u.deg, -10 * u.deg)
    shift = (
        t.light_travel_time(new_c, kind="barycentric")
        - t.light_travel_time(old_c, kind="barycentric")
    ).to_value(u.day)
    np.testing.assert_allclose(new_t - old_t, shift, rtol=0, atol=1e-9)
    assert np.all(np.abs(new_t - old_t) > 10 / 86400)  # tens of seconds, not noise
    np.testing.assert_allclose(
        new_t, (t.tdb + t.light_travel_time(new_c, kind="barycentric")).mjd, rtol=0, atol=1e-8
    )
    assert [p.value for p in _points(new_id)] == [1.0, 1.0, 1.0]
    src = Source.objects.get(slug="tarn-7")
    record, previous = _latest_two(src)
    assert record.history_user == curator
    assert {(ch.field, ch.old, ch.new) for ch in record.diff_against(previous).changes} == {
        ("ra", 150.0, 200.0),
        ("dec", 20.0, -10.0),
    }
    assert Upload.objects.get(pk=new_id).parameters["rederived"]["reason"] == (
        "source tarn-7 dec 20 -> -10, ra 150 -> 200 by cleo"
    )


def test_met_epoch_change_rederives_only_uploads_counted_from_it(
    catalogue, contributor, curator, client_for, upload_file
):
    """MET seconds count from the instrument's epoch unless the upload gave its own.

    Expected times with astropy: TT = epoch + MET/86400, to TDB, plus the light travel
    time from the geocentre (REFERENCES §3).
    """
    c = client_for(contributor)
    base = dict(source="tarn-7", band="gamma", instrument="wren-lat", value_unit="ph/(cm2 s)")
    defaults = upload_file(c, "time,value,error\n7e8,1e-6,1e-7\n", "a.csv", **base).json()["id"]
    fmt_only = upload_file(
        c, "time,value,error\n7e8,2e-6,1e-7\n", "b.csv", time_format="met", **base
    ).json()["id"]
    own = upload_file(
        c, "time,value,error\n7e8,3e-6,1e-7\n", "c.csv", met_epoch=51910.5, **base
    ).json()["id"]

    r = client_for(curator).patch(
        "/api/v1/instruments/wren-lat/", {"met_epoch": 51911.0}, format="json"
    )
    assert r.status_code == 200, r.json()
    new_ids = [int(i) for i in r["X-Lcstore-Rederived"].split(",")]
    assert sorted(Upload.objects.get(pk=i).supersedes_id for i in new_ids) == [defaults, fmt_only]
    assert Upload.objects.get(pk=own).status == "accepted"

    tt = Time(51911.0 + 7e8 / 86400.0, format="mjd", scale="tt")
    coord = SkyCoord(150 * u.deg, 20 * u.deg)
    expected = (tt.tdb + tt.light_travel_time(coord, kind="barycentric", location=GEOCENTRE)).mjd
    for i in new_ids:
        assert _points(i)[0].t == pytest.approx(expected, abs=1e-8)
        assert Upload.objects.get(pk=i).met_epoch == 51911.0


@pytest.mark.parametrize(
    ("path", "change", "message"),
    [
        ("/api/v1/bands/r/", {"mag_system": ""}, "no magnitude system"),
        (
            "/api/v1/instruments/hollow-hill-1m/",
            {"default_time_format": "mjd"},
            "plausible range",
        ),
        ("/api/v1/bands/r/", {"kind": "count_rate", "mag_system": ""}, "band 'r'"),
    ],
)
def test_change_that_breaks_a_conversion_is_refused_and_nothing_changes(
    catalogue, contributor, curator, client_for, upload_file, path, change, message
):
    c = client_for(contributor)
    up = _upload_mags(c, upload_file)
    before_csv = _csv(c)
    models = (Band.objects.get(slug="r"), Instrument.objects.get(slug="hollow-hill-1m"))
    history_counts = [m.history.count() for m in models]
    rows_before = [dict(type(m).objects.filter(pk=m.pk).values()[0]) for m in models]

    r = client_for(curator).patch(path, change, format="json")
    assert r.status_code == 409, r.json()
    body = r.json()
    assert body["uploads"] == [up]
    assert f"upload(s) {up}" in body["detail"] and "nothing was changed" in body["detail"]
    assert message in body["detail"]
    assert [dict(type(m).objects.filter(pk=m.pk).values()[0]) for m in models] == rows_before
    assert [m.history.count() for m in models] == history_counts
    assert Upload.objects.count() == 1 and Upload.objects.get(pk=up).status == "accepted"
    assert FluxPoint.objects.count() == 3
    assert _csv(c) == before_csv


@pytest.mark.parametrize(
    ("path", "field", "value"),
    [
        ("/api/v1/bands/r/", "name", "Cousins R (new filter set)"),
        ("/api/v1/sources/tarn-7/", "notes", "seen flaring in the invented 2026 campaign"),
        ("/api/v1/sources/tarn-7/", "name", "Tarn Seven"),
        ("/api/v1/instruments/hollow-hill-1m/", "notes", "dome repaired"),
    ],
)
def test_fields_outside_conversions_rederive_nothing(
    catalogue, contributor, curator, client_for, upload_file, path, field, value
):
    c = client_for(contributor)
    up = _upload_mags(c, upload_file)
    r = client_for(curator).patch(path, {field: value}, format="json")
    assert r.status_code == 200, r.json()
    assert r["X-Lcstore-Rederived"] == ""
    assert Upload.objects.count() == 1 and Upload.objects.get(pk=up).status == "accepted"
    model = {"bands": Band, "sources": Source, "instruments": Instrument}[path.split("/")[3]]
    record, previous = _latest_two(model.objects.get(slug=path.split("/")[4]))
    assert record.history_user == curator
    assert [ch.field for ch in record.diff_against(previous).changes] == [field]


def test_history_user_of_plain_curated_writes_comes_from_the_request(
    catalogue, curator, client_for
):
    """simple_history's HistoryRequestMiddleware sets history_user for token-authenticated
    API writes that do not go through the re-derivation service (calibration offsets)."""
    cur = client_for(curator)
    r = cur.post(
        "/api/v1/calibration-offsets/",
        {"instrument": "hollow-hill-1m", "band": "r", "factor": 1.05},
        format="json",
    )
    assert r.status_code == 201, r.json()
    r = cur.patch(f"/api/v1/calibration-offsets/{r.json()['id']}/", {"factor": 1.1}, format="json")
    assert r.status_code == 200, r.json()
    offset = CalibrationOffset.objects.get()
    record, previous = _latest_two(offset)
    assert (record.history_user, previous.history_user) == (curator, curator)
    assert [(ch.field, ch.old, ch.new) for ch in record.diff_against(previous).changes] == [
        ("factor", 1.05, 1.1)
    ]


def _admin_band_form(band: Band, **overrides: Any) -> dict[str, Any]:
    fields = (
        "slug",
        "name",
        "kind",
        "wavelength_eff",
        "mag_system",
        "zero_point_jy",
        "energy_min_kev",
        "energy_max_kev",
        "pivot_energy_kev",
        "photon_index",
        "counts_to_energy_flux",
    )
    data = {f: "" if getattr(band, f) is None else getattr(band, f) for f in fields}
    data.update(overrides)
    data["_save"] = "Save"
    return data


def test_admin_change_goes_through_the_same_service(
    catalogue, contributor, superuser, client_for, upload_file
):
    from django.test import Client

    up = _upload_mags(client_for(contributor), upload_file)
    admin = Client()
    admin.force_login(superuser)
    band = Band.objects.get(slug="r")
    url = f"/admin/lcstore/band/{band.pk}/change/"

    refused = admin.post(url, _admin_band_form(band, mag_system=""), follow=True)
    assert refused.status_code == 200
    assert "nothing was changed" in refused.content.decode()
    assert Band.objects.get(pk=band.pk).mag_system == "Vega"
    assert Upload.objects.count() == 1

    r = admin.post(url, _admin_band_form(band, zero_point_jy=3100.0))
    assert r.status_code == 302
    new = Upload.objects.get(supersedes_id=up)
    assert new.parameters["rederived"]["reason"] == (
        "band r zero_point_jy 3064 -> 3100 by root-admin"
    )
    record, _ = _latest_two(Band.objects.get(pk=band.pk))
    assert record.history_user == superuser and record.zero_point_jy == 3100.0
    # Bessell et al. 1998 relation with the new zero point (REFERENCES §1).
    np.testing.assert_allclose(
        [p.value for p in _points(new.pk)], 3100e3 * 10 ** (-0.4 * MAGS), rtol=1e-12
    )
