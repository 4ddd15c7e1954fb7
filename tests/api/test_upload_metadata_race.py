"""An upload's points are converted with the curated metadata its provenance names,
even when a curated change is committed while the upload is on its way
(lcstore/services.py ``upload_create``).

The race is made deterministic with a hook around the read
(``lcstore.services.upload_read_chunks``) that applies a curated change through
the real service (``curated_change_apply``, real ORM, real PostgreSQL) right
after the file was read and checked and before the upload's transaction opens
(which share-locks the curated rows, then converts). A second test runs the
change on another database connection while the upload is being converted and
stored, and checks that the change waits for the upload and then re-derives it.

Anchors (named beside each check):
- m = -2.5 log10(F / ZP): Bessell, Castelli & Plez 1998, Table A2 (R = 3064 Jy;
  REFERENCES §1), so F = ZP 10^(-0.4 m) with whichever ZP the provenance records;
- BJD_TDB = t_TDB + light travel time to the barycentre towards the source
  (Eastman, Siverd & Gaudi 2010), computed with astropy ``Time.light_travel_time``
  (REFERENCES §3).
"""

from __future__ import annotations

import json
import threading
import time
from typing import Any

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import EarthLocation, SkyCoord
from astropy.time import Time

from lcstore.models import Band, FluxPoint, Source, Upload

MAGS = np.array([14.00, 14.10, 13.90])
JD = np.array([2460000.0, 2460001.0, 2460002.0])
OPTICAL_CSV = "jd,mag,err\n" + "".join(f"{t},{m:.2f},0.02\n" for t, m in zip(JD, MAGS, strict=True))
SITE = EarthLocation.from_geodetic(-70.7 * u.deg, -30.2 * u.deg, 2200 * u.m)
MAG_FIELDS = dict(
    source="tarn-7",
    band="r",
    instrument="hollow-hill-1m",  # JD, UTC, topocentric by default (tests/conftest.py)
    columns=json.dumps({"time": "jd", "value": "mag", "error": "err"}),
    value_unit="mag",
)


def _between_read_and_conversion(monkeypatch: Any, change: Any) -> list[int]:
    """Run ``change()`` once, right after the file's first piece was read (before the transaction)."""
    import itertools

    import lcstore.services as services

    read = services.upload_read_chunks
    fired: list[int] = []

    def hooked(**kwargs: Any) -> Any:
        pieces = read(**kwargs)
        first = next(pieces)
        if not fired:
            fired.append(1)
            change()
        return itertools.chain([first], pieces)

    monkeypatch.setattr(services, "upload_read_chunks", hooked)
    return fired


def _latest_history_id(obj: Any) -> int:
    return obj.history.order_by("-history_id").first().history_id


def _points(upload_id: int) -> list[FluxPoint]:
    return list(FluxPoint.objects.filter(upload_id=upload_id).order_by("t"))


@pytest.mark.django_db
def test_zero_point_changed_during_an_upload_is_the_one_its_points_use(
    monkeypatch, catalogue, contributor, curator, client_for, upload_file
):
    from lcstore.rederive import curated_change_apply

    def change() -> None:
        curated_change_apply(
            instance=Band.objects.get(slug="r"), changes={"zero_point_jy": 3100.0}, user=curator
        )

    fired = _between_read_and_conversion(monkeypatch, change)
    r = upload_file(client_for(contributor), OPTICAL_CSV, "r-night.csv", **MAG_FIELDS)
    assert r.status_code == 201, r.json()
    assert fired == [1] and Band.objects.get(slug="r").zero_point_jy == 3100.0

    upload = Upload.objects.get(pk=r.json()["id"])
    recorded = upload.parameters["metadata"]["bands"]["r"]
    # The provenance names the version in force when the upload was stored ...
    assert recorded["zero_point_jy"] == 3100.0
    assert recorded["history_id"] == _latest_history_id(Band.objects.get(slug="r"))
    # ... and the points were converted with it: F = ZP 10^(-0.4 m) (Bessell et al. 1998),
    # in mJy, with the recorded ZP; 3064 Jy would be 1.2 % lower.
    values = np.array([p.value for p in _points(upload.pk)])
    np.testing.assert_allclose(values, recorded["zero_point_jy"] * 1e3 * 10 ** (-0.4 * MAGS))
    assert upload.status == "accepted" and Upload.objects.count() == 1


@pytest.mark.django_db
def test_source_position_changed_during_an_upload_is_the_one_its_times_use(
    monkeypatch, catalogue, contributor, curator, client_for, upload_file
):
    from lcstore.rederive import curated_change_apply

    def change() -> None:
        curated_change_apply(
            instance=Source.objects.get(slug="tarn-7"),
            changes={"ra": 200.0, "dec": -10.0},
            user=curator,
        )

    fired = _between_read_and_conversion(monkeypatch, change)
    r = upload_file(client_for(contributor), OPTICAL_CSV, "r-night.csv", **MAG_FIELDS)
    assert r.status_code == 201, r.json()
    assert fired == [1]

    upload = Upload.objects.get(pk=r.json()["id"])
    recorded = upload.parameters["metadata"]["sources"]["tarn-7"]
    assert (recorded["ra"], recorded["dec"]) == (200.0, -10.0)
    assert recorded["history_id"] == _latest_history_id(Source.objects.get(slug="tarn-7"))
    # BJD_TDB towards the recorded position (Eastman et al. 2010; astropy light_travel_time).
    t = Time(JD, format="jd", scale="utc", location=SITE)
    towards = SkyCoord(recorded["ra"] * u.deg, recorded["dec"] * u.deg)
    expected = (t.tdb + t.light_travel_time(towards, kind="barycentric")).mjd
    stored = np.array([p.t for p in _points(upload.pk)])
    np.testing.assert_allclose(stored, expected, rtol=0, atol=1e-8)


def _wait_until_another_backend_waits_on_a_lock(timeout_s: float = 20.0) -> bool:
    """Poll pg_stat_activity until another backend of this database waits on a lock."""
    from django.db import connection

    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        with connection.cursor() as cur:
            # the activity view is a snapshot per transaction unless cleared
            cur.execute("SELECT pg_stat_clear_snapshot()")
            cur.execute(
                "SELECT count(*) FROM pg_stat_activity WHERE datname = current_database() "
                "AND pid <> pg_backend_pid() AND wait_event_type = 'Lock'"
            )
            if cur.fetchone()[0] > 0:
                return True
        time.sleep(0.05)
    return False


# Real commits on two connections; the groups of the data migration are restored after
# the flush (serialized_rollback), as in the other transactional tests.
@pytest.mark.django_db(transaction=True, serialized_rollback=True)
def test_a_change_committed_while_the_upload_is_stored_waits_and_then_rederives_it(
    monkeypatch, catalogue, contributor, curator
):
    """Another connection changes the zero point while the upload's transaction converts and writes.

    The change must wait for the upload (the curated rows it was converted with are
    locked) and then find it among the uploads to re-derive; without the lock the
    change would commit first and the new upload would keep points of the old zero point.
    """
    from django.db import connection

    import lcstore.services as services
    from lcstore.rederive import curated_change_apply
    from lcstore.services import UploadParams, upload_create

    stream = services.points_stream
    outcome: dict[str, Any] = {}

    def change_in_another_connection() -> None:
        try:
            _, new = curated_change_apply(
                instance=Band.objects.get(slug="r"), changes={"zero_point_jy": 3100.0}, user=curator
            )
            outcome["rederived"] = [(u.pk, u.supersedes_id) for u in new]
        except Exception as exc:  # reported by the assertion below
            outcome["error"] = repr(exc)
        finally:
            connection.close()

    other = threading.Thread(target=change_in_another_connection)

    def hooked_stream(**kwargs: Any) -> Any:
        # inside the upload's transaction: the curated rows are locked, the first piece converted
        other.start()
        outcome["change_waited"] = _wait_until_another_backend_waits_on_a_lock()
        return stream(**kwargs)

    monkeypatch.setattr(services, "points_stream", hooked_stream)
    upload = upload_create(
        uploader=contributor,
        data=OPTICAL_CSV.encode(),
        file_name="r-night.csv",
        params=UploadParams(
            source="tarn-7",
            band="r",
            instrument="hollow-hill-1m",
            columns={"time": "jd", "value": "mag", "error": "err"},
            value_unit="mag",
        ),
    )
    other.join(timeout=60)
    assert not other.is_alive()
    assert "error" not in outcome, outcome
    assert outcome["change_waited"], "the curated change did not wait for the upload"
    # The change re-derived the upload it waited for (Bessell et al. 1998: F = ZP 10^(-0.4 m)).
    assert [old for _, old in outcome["rederived"]] == [upload.pk]
    new_id = outcome["rederived"][0][0]
    np.testing.assert_allclose(
        [p.value for p in _points(upload.pk)], 3064e3 * 10 ** (-0.4 * MAGS), rtol=1e-12
    )
    np.testing.assert_allclose(
        [p.value for p in _points(new_id)], 3100e3 * 10 ** (-0.4 * MAGS), rtol=1e-12
    )
    assert (
        Upload.objects.get(pk=upload.pk).parameters["metadata"]["bands"]["r"]["zero_point_jy"]
        == 3064.0
    )
