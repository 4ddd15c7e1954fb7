"""Catalogue resources: curators write, readers read, model rules enforced through the API.

Cone search is checked against astropy's SkyCoord.separation (Vincenty formula).
"""

from __future__ import annotations

import pytest
from astropy import units as u
from astropy.coordinates import SkyCoord
from django.db import connection
from django.test.utils import CaptureQueriesContext

from lcstore.models import Source

pytestmark = pytest.mark.django_db


def test_readers_read_curators_write(catalogue, reader, contributor, curator, client_for):
    new = {"slug": "mire-3", "name": "Mire 3", "ra": 10.0, "dec": -5.0, "ebv": 0.02}
    assert client_for(None).get("/api/v1/sources/").status_code in (401, 403)
    assert client_for(reader).get("/api/v1/sources/").status_code == 200
    assert client_for(reader).post("/api/v1/sources/", new, format="json").status_code == 403
    assert client_for(contributor).post("/api/v1/sources/", new, format="json").status_code == 403
    r = client_for(curator).post("/api/v1/sources/", new, format="json")
    assert r.status_code == 201, r.json()
    r = client_for(curator).patch("/api/v1/sources/mire-3/", {"redshift": 0.5}, format="json")
    assert r.status_code == 200 and r.json()["redshift"] == 0.5


def test_public_read_setting(catalogue, client_for, settings):
    settings.LCSTORE_PUBLIC_READ = True
    assert client_for(None).get("/api/v1/sources/").status_code == 200
    assert client_for(None).post("/api/v1/sources/", {}, format="json").status_code in (401, 403)


@pytest.mark.parametrize(
    "payload, field, message",
    [
        (
            {
                "slug": "b1",
                "name": "B",
                "kind": "flux_density",
                "wavelength_eff": 5000,
                "mag_system": "Vega",
            },
            "zero_point_jy",
            "Vega-system band needs its zero point",
        ),
        (
            {"slug": "b2", "name": "B", "kind": "photon_flux"},
            "energy_min_kev",
            "energy band needs its energy range",
        ),
        (
            {"slug": "b3", "name": "B", "kind": "flux_density"},
            "wavelength_eff",
            "effective wavelength",
        ),
        (
            {
                "slug": "b4",
                "name": "B",
                "kind": "energy_flux",
                "energy_min_kev": 10,
                "energy_max_kev": 2,
            },
            "energy_max_kev",
            "must exceed",
        ),
    ],
)
def test_band_rules(catalogue, curator, client_for, payload, field, message):
    r = client_for(curator).post("/api/v1/bands/", payload, format="json")
    assert r.status_code == 400
    assert message in str(r.json()["fields"][field])
    assert message in r.json()["detail"]


def test_ground_instrument_needs_site(catalogue, curator, client_for):
    r = client_for(curator).post(
        "/api/v1/instruments/", {"slug": "i1", "name": "I", "kind": "ground"}, format="json"
    )
    assert r.status_code == 400
    assert "needs its site" in r.json()["detail"]


def test_search_by_alias_and_cone(catalogue, reader, client_for):
    Source.objects.create(slug="far-1", name="Far 1", ra=200.0, dec=-40.0)
    Source.objects.create(slug="near-1", name="Near 1", ra=151.5, dec=21.0)
    c = client_for(reader)
    hits = c.get("/api/v1/sources/?q=trn j1000").json()["results"]
    assert [h["slug"] for h in hits] == ["tarn-7"]
    centre = SkyCoord(150 * u.deg, 20 * u.deg)
    for radius in (0.5, 1.5, 2.0):
        got = {
            h["slug"]
            for h in c.get(f"/api/v1/sources/?ra=150&dec=20&radius={radius}").json()["results"]
        }
        expected = {
            s.slug
            for s in Source.objects.all()
            if centre.separation(SkyCoord(s.ra * u.deg, s.dec * u.deg)).deg <= radius
        }
        assert got == expected
    assert c.get("/api/v1/sources/?ra=150&dec=20").status_code == 400


def test_source_list_query_count_does_not_grow(catalogue, reader, client_for):
    c = client_for(reader)
    c.get("/api/v1/sources/")
    with CaptureQueriesContext(connection) as few:
        c.get("/api/v1/sources/")
    for i in range(10):
        Source.objects.create(slug=f"s{i}", name=f"S {i}", ra=float(i), dec=0.0)
    with CaptureQueriesContext(connection) as many:
        c.get("/api/v1/sources/")
    assert len(many) == len(few)
