"""Cached curve answers in a real Redis (``REDIS_URL``), invalidated by every data change.

lcstore/settings.py picks Django's built-in Redis backend
(``django.core.cache.backends.redis.RedisCache``, Django 4.0+ docs, "Redis" under
"Setting up the cache") when ``REDIS_URL`` is set. The tests below run the settings
file under that variable and use the cache configuration it produces, against the
Redis server of ``LCSTORE_TEST_REDIS_URL`` (default db 14 of 127.0.0.1:6379). Each
test writes only keys under its own KEY_PREFIX and deletes them afterwards; the
database is never flushed, so concurrent runs do not disturb each other. Skipped
when no Redis answers.
"""

from __future__ import annotations

import os
import pickle
import runpy
import secrets
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import redis
from django.test import override_settings

ROOT = Path(__file__).resolve().parent.parent
REDIS_URL = os.environ.get("LCSTORE_TEST_REDIS_URL", "redis://127.0.0.1:6379/14")
URL = "/api/v1/sources/tarn-7/lightcurve/?bands=r&bin=1d&format=csv"
BASE = dict(
    source="tarn-7",
    band="r",
    value_unit="mJy",
    time_format="mjd",
    time_scale="tdb",
    time_reference="BARYCENTER",
)


def _settings_caches(monkeypatch: pytest.MonkeyPatch, redis_url: str | None) -> dict[str, Any]:
    if redis_url is None:
        monkeypatch.delenv("REDIS_URL", raising=False)
    else:
        monkeypatch.setenv("REDIS_URL", redis_url)
    return runpy.run_path(str(ROOT / "lcstore" / "settings.py"))["CACHES"]


def test_redis_url_selects_djangos_redis_backend(monkeypatch):
    caches = _settings_caches(monkeypatch, "redis://cache.example.org:6379/3")
    assert caches["default"]["BACKEND"] == "django.core.cache.backends.redis.RedisCache"
    assert caches["default"]["LOCATION"] == "redis://cache.example.org:6379/3"


def test_without_redis_url_the_cache_is_local_memory(monkeypatch):
    caches = _settings_caches(monkeypatch, None)
    assert caches["default"]["BACKEND"] == "django.core.cache.backends.locmem.LocMemCache"


@pytest.fixture
def redis_cache(monkeypatch: pytest.MonkeyPatch) -> Iterator[tuple[redis.Redis, str]]:
    """The settings' Redis cache, with a prefix of this test's own; the raw client."""
    raw = redis.Redis.from_url(REDIS_URL, socket_connect_timeout=1, socket_timeout=5)
    try:
        raw.ping()
    except redis.exceptions.ConnectionError as exc:
        pytest.skip(f"no Redis answers at {REDIS_URL}: {exc}")
    caches = _settings_caches(monkeypatch, REDIS_URL)
    prefix = f"lcstore-test-{os.getpid()}-{secrets.token_hex(4)}"
    caches["default"]["KEY_PREFIX"] = prefix
    try:
        with override_settings(CACHES=caches):
            yield raw, prefix
    finally:
        for key in raw.scan_iter(match=f"{prefix}:*"):
            raw.delete(key)
        raw.close()


def _answer_keys(raw: redis.Redis, prefix: str) -> set[bytes]:
    # Django's RedisCache stores "<KEY_PREFIX>:<VERSION>:<key>"; api/cache.py's keys
    # start "lcstore:answer:".
    return set(raw.scan_iter(match=f"{prefix}:1:lcstore:answer:*"))


def test_cached_answer_is_served_from_redis_and_invalidated(
    redis_cache, catalogue, contributor, curator, client_for, upload_file
):
    from django.conf import settings
    from django.core.cache import caches
    from django.core.cache.backends.redis import RedisCache

    from lcstore.models import Instrument

    raw, prefix = redis_cache
    assert isinstance(caches["default"], RedisCache)

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
    r1 = "time,value,error\n60000.1,1.0,0.1\n60000.2,1.2,0.2\n60001.1,2.0,0.1\n"
    r2 = "time,value,error\n60001.6,2.2,0.1\n60002.5,3.0,0.3\n"
    assert upload_file(c, r1, "r1.csv", instrument="hollow-hill-1m", **BASE).status_code == 201
    assert upload_file(c, r2, "r2.csv", instrument=second.slug, **BASE).status_code == 201

    # A miss computes the answer and stores it in Redis, with the configured lifetime.
    first = c.get(URL)
    assert first.status_code == 200 and first["X-Lcstore-Cache"] == "miss"
    keys = _answer_keys(raw, prefix)
    assert len(keys) == 1
    (key,) = keys
    body, ctype = pickle.loads(raw.get(key))
    assert body == first.content and ctype.startswith("text/csv")
    assert 0 < raw.ttl(key) <= settings.LCSTORE_CACHE_SECONDS

    again = c.get(URL)
    assert again["X-Lcstore-Cache"] == "hit" and again.content == first.content

    # The hit comes from Redis: what Redis holds under the key is what is served.
    raw.set(key, pickle.dumps((b"band,time\nplanted,0\n", ctype)), keepttl=True)
    planted = c.get(URL)
    assert planted["X-Lcstore-Cache"] == "hit" and planted.content == b"band,time\nplanted,0\n"
    raw.delete(key)
    rebuilt = c.get(URL)
    assert rebuilt["X-Lcstore-Cache"] == "miss" and rebuilt.content == first.content

    # A new upload changes the source's data version: a new key, a fresh answer.
    late_csv = "time,value,error\n60005.5,9.0,0.1\n"
    late = upload_file(c, late_csv, "late.csv", instrument="hollow-hill-1m", **BASE)
    assert late.status_code == 201
    after_upload = c.get(URL)
    assert after_upload["X-Lcstore-Cache"] == "miss"
    assert after_upload.content.decode().splitlines()[-1].startswith("r,60005.5,")
    assert len(_answer_keys(raw, prefix)) == 2
    assert c.get(URL)["X-Lcstore-Cache"] == "hit"

    # A retraction moves the version again; the answer is the one before the upload.
    r = c.post(f"/api/v1/uploads/{late.json()['id']}/retract/", {"reason": "test"}, format="json")
    assert r.status_code == 200, r.content
    after_retraction = c.get(URL)
    assert after_retraction["X-Lcstore-Cache"] == "miss"
    assert after_retraction.content == first.content
    assert len(_answer_keys(raw, prefix)) == 3

    # A curated change (a calibration offset for one telescope) moves the catalogue version.
    r = client_for(curator).post(
        "/api/v1/calibration-offsets/",
        {"instrument": "fern-0p6", "band": "r", "factor": 0.5},
        format="json",
    )
    assert r.status_code == 201, r.content
    after_curation = c.get(URL)
    assert after_curation["X-Lcstore-Cache"] == "miss"
    assert after_curation.content != first.content
    assert len(_answer_keys(raw, prefix)) == 4
    assert c.get(URL)["X-Lcstore-Cache"] == "hit"
