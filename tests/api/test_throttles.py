"""Request budgets: 429 with Retry-After, per account, reads never charged to uploads.

Anchor: OWASP API Security Top 10 2023, API4 (unrestricted resource consumption).
The 429 status and its Retry-After header: RFC 6585 §4 and RFC 9110 §10.2.3.
"""

from __future__ import annotations

from typing import Any

import pytest
from django.core.exceptions import ImproperlyConfigured

from lcstore.models import Job, Upload

pytestmark = pytest.mark.django_db

UPLOAD = dict(
    source="tarn-7", band="r", instrument="hollow-hill-1m", value_unit="mJy", time_format="mjd"
)


def _rates(settings: Any, **rates: str | None) -> None:
    table = dict(settings.REST_FRAMEWORK["DEFAULT_THROTTLE_RATES"]) | rates
    settings.REST_FRAMEWORK = {**settings.REST_FRAMEWORK, "DEFAULT_THROTTLE_RATES": table}


def _assert_throttled(r: Any, period_s: int) -> None:
    assert r.status_code == 429
    assert "throttled" in r.json()["detail"]
    # RFC 9110 §10.2.3: delay-seconds, a non-negative integer; DRF waits out the window.
    assert 0 < int(r["Retry-After"]) <= period_s


def test_uploads_budget_is_per_account_and_only_for_writes(
    settings, catalogue, contributor, other_contributor, client_for, upload_file
):
    _rates(settings, uploads="2/hour")
    c = client_for(contributor)
    for i in range(2):
        r = upload_file(c, f"time,value\n{60000 + i},1.0\n", f"{i}.csv", **UPLOAD)
        assert r.status_code == 201, r.json()
    r = upload_file(c, "time,value\n60005,1.0\n", "late.csv", **UPLOAD)
    _assert_throttled(r, 3600)
    assert Upload.objects.count() == 2
    # reading the uploads is not charged to the upload budget
    assert c.get("/api/v1/uploads/").status_code == 200
    # another account has its own budget
    r = upload_file(client_for(other_contributor), "time,value\n60009,1.0\n", "b.csv", **UPLOAD)
    assert r.status_code == 201


def test_heavy_budget_covers_computed_answers(settings, catalogue, reader, client_for):
    _rates(settings, heavy="2/min")
    c = client_for(reader)
    paths = [
        "/api/v1/sources/tarn-7/variability/",
        "/api/v1/sources/tarn-7/sed/?at=60000",
    ]
    assert [c.get(p).status_code for p in paths] == [200, 200]
    _assert_throttled(c.get("/api/v1/sources/tarn-7/correlation/?x=r&y=v"), 60)
    _assert_throttled(c.get("/api/v1/sources/tarn-7/lags/?x=r&y=v"), 60)
    # the catalogue is read from the read budget only
    assert c.get("/api/v1/sources/").status_code == 200


def test_job_submissions_share_the_heavy_budget_polling_does_not(
    settings, catalogue, reader, client_for
):
    _rates(settings, heavy="1/min")
    c = client_for(reader)
    body = {"kind": "correlation", "source": "tarn-7", "parameters": {"x": "r", "y": "v"}}
    first = c.post("/api/v1/jobs/", body, format="json")
    assert first.status_code == 202
    for _ in range(3):
        assert c.get(first["Location"]).status_code == 200
    _assert_throttled(c.post("/api/v1/jobs/", body, format="json"), 60)
    assert Job.objects.count() == 1


def test_read_budget_covers_every_request(settings, catalogue, reader, client_for):
    _rates(settings, read="3/min")
    c = client_for(reader)
    assert [c.get("/api/v1/bands/").status_code for _ in range(3)] == [200] * 3
    _assert_throttled(c.get("/api/v1/sources/tarn-7/"), 60)


def test_anonymous_budget_is_per_address_and_ignores_a_forged_forwarded_for(
    settings, catalogue, client_for
):
    settings.LCSTORE_PUBLIC_READ = True
    _rates(settings, read="2/min")
    c = client_for(None)
    assert c.get("/api/v1/bands/", REMOTE_ADDR="10.0.0.1").status_code == 200
    assert c.get("/api/v1/bands/", REMOTE_ADDR="10.0.0.1").status_code == 200
    # NUM_PROXIES = 0 (the default): X-Forwarded-For is not trusted
    r = c.get("/api/v1/bands/", REMOTE_ADDR="10.0.0.1", HTTP_X_FORWARDED_FOR="192.0.2.7")
    _assert_throttled(r, 60)
    assert c.get("/api/v1/bands/", REMOTE_ADDR="10.0.0.2").status_code == 200


def test_behind_one_proxy_the_client_address_comes_from_forwarded_for(
    settings, catalogue, client_for
):
    settings.LCSTORE_PUBLIC_READ = True
    settings.REST_FRAMEWORK = {**settings.REST_FRAMEWORK, "NUM_PROXIES": 1}
    _rates(settings, read="1/min")
    c = client_for(None)
    proxy = "10.9.9.9"
    r = c.get("/api/v1/bands/", REMOTE_ADDR=proxy, HTTP_X_FORWARDED_FOR="192.0.2.1")
    assert r.status_code == 200
    _assert_throttled(
        c.get("/api/v1/bands/", REMOTE_ADDR=proxy, HTTP_X_FORWARDED_FOR="192.0.2.1"), 60
    )
    # the proxy appends the real peer last; a client-forged first entry changes nothing
    r = c.get("/api/v1/bands/", REMOTE_ADDR=proxy, HTTP_X_FORWARDED_FOR="6.6.6.6, 192.0.2.1")
    _assert_throttled(r, 60)
    r = c.get("/api/v1/bands/", REMOTE_ADDR=proxy, HTTP_X_FORWARDED_FOR="192.0.2.2")
    assert r.status_code == 200


def test_a_budget_set_to_off_is_not_counted(settings, catalogue, reader, client_for):
    _rates(settings, read=None)
    c = client_for(reader)
    assert all(c.get("/api/v1/bands/").status_code == 200 for _ in range(5))


@pytest.mark.parametrize(
    ("value", "expected"),
    [("60/hour", "60/hour"), ("5/s", "5/s"), ("off", None), ("", None), (" 10/day ", "10/day")],
)
def test_rate_settings_are_read_from_the_environment(monkeypatch, value, expected):
    from lcstore.settings import _env_rate

    monkeypatch.setenv("LCSTORE_THROTTLE_TEST", value)
    assert _env_rate("LCSTORE_THROTTLE_TEST", "1/hour") == expected


@pytest.mark.parametrize("value", ["sixty/hour", "60", "60/fortnight", "-1/hour"])
def test_a_malformed_rate_setting_stops_the_start(monkeypatch, value):
    from lcstore.settings import _env_rate

    monkeypatch.setenv("LCSTORE_THROTTLE_TEST", value)
    with pytest.raises(ImproperlyConfigured, match="LCSTORE_THROTTLE_TEST"):
        _env_rate("LCSTORE_THROTTLE_TEST", "1/hour")


def test_default_rates_are_the_documented_ones():
    import os

    from lcstore import settings as s

    names = ("LCSTORE_THROTTLE_UPLOADS", "LCSTORE_THROTTLE_HEAVY", "LCSTORE_THROTTLE_READ")
    if any(n in os.environ for n in names):
        pytest.skip("rates set in the environment")

    assert (s.LCSTORE_THROTTLE_UPLOADS, s.LCSTORE_THROTTLE_HEAVY, s.LCSTORE_THROTTLE_READ) == (
        "60/hour",
        "600/hour",
        "10000/hour",
    )


def test_lightcurve_counts_against_the_heavy_budget(settings, catalogue, reader, client_for):
    _rates(settings, heavy="1/min")
    c = client_for(reader)
    assert c.get("/api/v1/sources/tarn-7/lightcurve/").status_code == 200
    _assert_throttled(c.get("/api/v1/sources/tarn-7/lightcurve/?bin=1d"), 60)
