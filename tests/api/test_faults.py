"""Faults and races leave no trace and lose nothing (issue: reliability).

References: PostgreSQL's transaction semantics (one transaction per upload) and
the advisory lock on the checksum; nothing here is mocked but the fault itself.
"""

from __future__ import annotations

import threading

import psycopg
import pytest
from django.db import connection

from lcstore.models import FluxPoint, StoredFile, Upload
from lcstore.services import UploadConflict, UploadParams, upload_create

ROWS = "time,value,error\n" + "\n".join(f"{60000 + i * 0.01:.2f},1.0,0.1" for i in range(2000))
PARAMS = UploadParams(
    instrument="hollow-hill-1m",
    source="tarn-7",
    band="r",
    value_unit="mJy",
    time_format="mjd",
    time_scale="tdb",
    time_reference="BARYCENTER",
)


@pytest.mark.django_db(transaction=True, serialized_rollback=True)
def test_concurrent_uploads_of_the_same_bytes_store_them_once(
    catalogue, contributor, other_contributor
):
    barrier = threading.Barrier(2)
    outcomes: list[str] = []

    def send(user):
        try:
            barrier.wait(timeout=30)
            upload_create(uploader=user, data=ROWS.encode(), file_name="same.csv", params=PARAMS)
            outcomes.append("accepted")
        except UploadConflict:
            outcomes.append("conflict")
        finally:
            connection.close()

    threads = [threading.Thread(target=send, args=(u,)) for u in (contributor, other_contributor)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    assert sorted(outcomes) == ["accepted", "conflict"]
    assert Upload.objects.count() == 1 and StoredFile.objects.count() == 1
    assert FluxPoint.objects.count() == 2000


@pytest.mark.django_db
def test_a_database_error_at_the_last_row_leaves_nothing(catalogue, contributor, monkeypatch):
    import lcstore.services as services

    real_load = services.points_load

    def load_then_fail(*args, **kwargs):
        real_load(*args, **kwargs)  # every row reached the table inside the transaction
        raise psycopg.errors.DiskFull("could not extend file: no space left on device")

    monkeypatch.setattr(services, "points_load", load_then_fail)
    with pytest.raises(Exception, match="no space left"):
        upload_create(uploader=contributor, data=ROWS.encode(), file_name="f.csv", params=PARAMS)
    assert FluxPoint.objects.count() == 0
    assert Upload.objects.count() == 0 and StoredFile.objects.count() == 0
    # and the same file is accepted afterwards
    monkeypatch.setattr(services, "points_load", real_load)
    u = upload_create(uploader=contributor, data=ROWS.encode(), file_name="f.csv", params=PARAMS)
    assert u.n_points == 2000 and FluxPoint.objects.count() == 2000


@pytest.mark.django_db
def test_a_crashed_job_is_marked_failed_and_can_be_retried(
    catalogue, contributor, client_for, monkeypatch, settings, django_capture_on_commit_callbacks
):
    import lcstore.jobs as jobs

    settings.TASKS = {"default": {"BACKEND": "django_tasks.backends.immediate.ImmediateBackend"}}
    c = client_for(contributor)
    real = jobs.lags_summary

    def crash(**kwargs):
        raise MemoryError("worker ran out of memory")

    monkeypatch.setattr(jobs, "lags_summary", crash)
    with django_capture_on_commit_callbacks(execute=True):
        r = c.post(
            "/api/v1/jobs/",
            {"kind": "lags", "source": "tarn-7", "parameters": {"x": "r", "y": "v"}},
            format="json",
        )
    assert r.status_code == 202
    job = c.get(r["Location"]).json()
    assert job["state"] == "failed" and "MemoryError" in job["error"]
    monkeypatch.setattr(jobs, "lags_summary", real)
    with django_capture_on_commit_callbacks(execute=True):
        r = c.post(f"/api/v1/jobs/{job['id']}/retry/")
    assert r.status_code == 202
    again = c.get(f"/api/v1/jobs/{job['id']}/").json()
    assert again["attempts"] == 2
    # no points: the retried job ends with the service's own clear refusal, not a crash
    assert again["state"] == "failed" and "at least 3 detections" in again["error"]
