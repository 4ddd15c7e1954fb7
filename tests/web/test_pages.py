"""Pages for people: sign-in, a page per source, an upload form that shows per-row errors."""

from __future__ import annotations

import io

import pytest

pytestmark = pytest.mark.django_db


def test_pages_need_sign_in(catalogue, client):
    r = client.get("/sources/tarn-7/")
    assert r.status_code == 302 and r["Location"].startswith("/login/")


def test_source_page_lists_bands_and_links(catalogue, contributor, client, upload_file, client_for):
    api = client_for(contributor)
    assert (
        upload_file(
            api,
            "time,value,error\n60000,1,0.1\n60001,2,0.1\n",
            "r.csv",
            source="tarn-7",
            band="r",
            instrument="hollow-hill-1m",
            value_unit="mJy",
            time_format="mjd",
        ).status_code
        == 201
    )
    client.force_login(contributor)
    page = client.get("/sources/tarn-7/").content.decode()
    assert "Tarn 7" in page and 'id="band-r"' in page
    assert "/api/v1/sources/tarn-7/lightcurve/?bands=r&amp;bin=1d&amp;format=csv" in page
    assert client.get("/").content.decode().count("r (2)") == 1


def test_upload_page_shows_row_errors_and_stores_nothing(catalogue, contributor, client):
    from lcstore.models import Upload

    client.force_login(contributor)
    f = io.BytesIO(b"time,value,error\n60000,abc,0.1\n60001,1,-1\n")
    f.name = "bad.csv"
    r = client.post(
        "/upload/",
        {
            "file": f,
            "source": "tarn-7",
            "band": "r",
            "instrument": "hollow-hill-1m",
            "value_unit": "mJy",
            "time_format": "mjd",
        },
    )
    assert r.status_code == 400
    text = r.content.decode()
    assert "rejected with 2 problems" in text
    assert "value is not a number" in text and "error must be positive" in text
    assert Upload.objects.count() == 0
