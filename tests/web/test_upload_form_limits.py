"""The upload form's limits: the same upload budget as the API, and the column mapping rules.

Budget anchor: OWASP API Security Top 10 2023, API4 (unrestricted resource consumption);
the 429 status and its Retry-After header: RFC 6585 §4 and RFC 9110 §10.2.3.
"""

from __future__ import annotations

import io
from typing import Any

import pytest

from lcstore.models import FluxPoint, StoredFile, Upload

pytestmark = pytest.mark.django_db

FIELDS = dict(
    source="tarn-7", band="r", instrument="hollow-hill-1m", value_unit="mJy", time_format="mjd"
)


def _rates(settings: Any, **rates: str | None) -> None:
    table = dict(settings.REST_FRAMEWORK["DEFAULT_THROTTLE_RATES"]) | rates
    settings.REST_FRAMEWORK = {**settings.REST_FRAMEWORK, "DEFAULT_THROTTLE_RATES": table}


def _post_form(client: Any, text: str, name: str, **fields: Any) -> Any:
    f = io.BytesIO(text.encode())
    f.name = name
    return client.post("/upload/", {"file": f, **FIELDS, **fields})


def _assert_throttled_page(r: Any, period_s: int) -> None:
    assert r.status_code == 429
    # RFC 9110 §10.2.3: delay-seconds, a non-negative integer; the window is waited out.
    wait = int(r["Retry-After"])
    assert 0 < wait <= period_s
    page = r.content.decode()
    assert 'id="upload-error"' in page
    assert "too many uploads" in page and "nothing was stored" in page
    assert "Try again in" in page
    assert "<form" in page  # the form is still there, with what was typed
    assert 'value="mJy"' in page


def test_form_uploads_share_the_api_budget_and_are_answered_429(
    settings, catalogue, contributor, other_contributor, client, client_for, upload_file
):
    _rates(settings, uploads="3/hour", read="1000/hour")
    client.force_login(contributor)
    for i in range(2):
        r = _post_form(client, f"time,value\n{60000 + i},1.0\n", f"{i}.csv")
        assert r.status_code == 201, r.content.decode()[:500]
    # the API draws on the same budget of the account
    api = client_for(contributor)
    assert upload_file(api, "time,value\n60003,1.0\n", "api.csv", **FIELDS).status_code == 201
    r = _post_form(client, "time,value\n60004,1.0\n", "late.csv")
    _assert_throttled_page(r, 3600)
    assert Upload.objects.count() == 3
    r = upload_file(api, "time,value\n60005,1.0\n", "api-late.csv", **FIELDS)
    assert r.status_code == 429
    # showing the form costs nothing; another account has its own budget
    assert client.get("/upload/").status_code == 200
    client.force_login(other_contributor)
    assert _post_form(client, "time,value\n60009,1.0\n", "b.csv").status_code == 201


def test_a_rejected_form_upload_counts_like_a_rejected_api_upload(
    settings, catalogue, contributor, client
):
    _rates(settings, uploads="1/hour")
    client.force_login(contributor)
    assert _post_form(client, "time,value\n60000,abc\n", "bad.csv").status_code == 400
    _assert_throttled_page(_post_form(client, "time,value\n60000,1.0\n", "ok.csv"), 3600)
    assert Upload.objects.count() == 0


def test_non_contributors_are_refused_before_the_budget(settings, catalogue, reader, client):
    _rates(settings, uploads="1/hour")
    client.force_login(reader)
    for _ in range(3):
        assert _post_form(client, "time,value\n60000,1.0\n", "r.csv").status_code == 403


def test_a_budget_set_to_off_is_not_counted(settings, catalogue, contributor, client):
    _rates(settings, uploads=None)
    client.force_login(contributor)
    codes = [_post_form(client, f"time,value\n{60000 + i},1.0\n", f"{i}.csv") for i in range(4)]
    assert [r.status_code for r in codes] == [201] * 4


def test_form_refuses_two_columns_for_one_role(catalogue, contributor, client):
    client.force_login(contributor)
    text = "mjd,flux,mag,err\n60000,1.5,14.2,0.1\n"
    r = _post_form(
        client, text, "m.csv", columns='{"time": "mjd", "value": "flux", "value": "mag"}'
    )
    assert r.status_code == 400
    page = r.content.decode()
    assert "role &#x27;value&#x27; is given two columns (&#x27;flux&#x27; and &#x27;mag&#x27;)" in (
        page
    )
    r = _post_form(client, text, "m.csv", columns='{"time": "mjd", "value": "mjd"}')
    assert r.status_code == 400
    page = r.content.decode()
    assert "column &#x27;mjd&#x27; is given two roles (time and value)" in page
    assert (Upload.objects.count(), FluxPoint.objects.count(), StoredFile.objects.count()) == (
        0,
        0,
        0,
    )


def _multipart(parts: list[tuple[str, str | None, bytes]], boundary: str) -> bytes:
    out = b""
    for name, filename, content in parts:
        disp = f'form-data; name="{name}"' + (f'; filename="{filename}"' if filename else "")
        out += f"--{boundary}\r\nContent-Disposition: {disp}\r\n".encode()
        if filename:
            out += b"Content-Type: text/csv\r\n"
        out += b"\r\n" + content + b"\r\n"
    return out + f"--{boundary}--\r\n".encode()


@pytest.mark.parametrize("cut", ["none", "after the file", "inside the reduction"])
def test_a_form_upload_cut_short_is_refused_and_stores_nothing(catalogue, contributor, cut):
    """The form reads request.FILES itself, so it repeats the API parser's check
    (api.parsers.body_shortfall): a body shorter than its Content-Length (RFC 9110 §8.6)
    was cut by the client; a field after the file would be missing or truncated."""
    from django.core.handlers.wsgi import WSGIRequest

    from web.views import upload_form

    boundary = "lcstoreBoundary7"
    csv = b"time,value,error\n" + b"".join(
        f"{60000 + i},{1.0 + 0.01 * i:.2f},0.05\n".encode() for i in range(50)
    )
    parts = [(k, None, v.encode()) for k, v in FIELDS.items()]
    parts += [("file", "cut.csv", csv), ("reduction", None, b"aperture photometry, 5 arcsec")]
    body = _multipart(parts, boundary)
    sent = {
        "none": body,
        "after the file": body[: body.index(b'name="reduction"') - 60],
        "inside the reduction": body[: body.index(b"photometry")],
    }[cut]
    request = WSGIRequest(
        {
            "REQUEST_METHOD": "POST",
            "PATH_INFO": "/upload/",
            "SERVER_NAME": "testserver",
            "SERVER_PORT": "80",
            "wsgi.url_scheme": "http",
            "wsgi.input": io.BytesIO(sent),  # the connection ends where the bytes do
            "CONTENT_TYPE": f"multipart/form-data; boundary={boundary}",
            "CONTENT_LENGTH": str(len(body)),
        }
    )
    request.user = contributor
    request._dont_enforce_csrf_checks = True
    response = upload_form(request)
    if cut == "none":
        assert response.status_code == 201, response.content[:500]
        assert Upload.objects.get().reduction == "aperture photometry, 5 arcsec"
        return
    assert response.status_code == 400
    assert b"the connection was cut" in response.content
    assert (Upload.objects.count(), StoredFile.objects.count(), FluxPoint.objects.count()) == (
        0,
        0,
        0,
    )
