"""Faults and races leave no trace and lose nothing (issue: reliability).

References: PostgreSQL's transaction semantics (one transaction per upload) and
the advisory lock on the checksum; HTTP/1.1 message framing by Content-Length
(RFC 9112 §6.2: a body shorter than declared is an incomplete message; §9.6:
the client closing its side is how it goes away); PostgreSQL's session-level
advisory locks, released when the session ends (PostgreSQL manual, "Advisory
Locks"). Nothing here is mocked but the fault itself: clients are raw sockets
against a live server, a killed worker is a real ``manage.py db_worker``
process sent SIGKILL.
"""

from __future__ import annotations

import datetime as dt
import gc
import io
import logging
import os
import signal
import socket
import struct
import subprocess
import sys
import threading
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import httpx
import psycopg
import pytest
from django.core.management import call_command
from django.core.signals import request_finished
from django.db import connection
from django.utils import timezone

from lcstore.jobs import STALE_ERROR, job_run, jobs_sweep_stale
from lcstore.models import FluxPoint, Job, JobState, StoredFile, Upload
from lcstore.services import UploadConflict, UploadParams, upload_create

ROOT = Path(__file__).resolve().parents[2]
live = pytest.mark.django_db(transaction=True, serialized_rollback=True)

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
    import contextlib

    import lcstore.services as services

    real_stream = services.points_stream

    @contextlib.contextmanager
    def stream_then_fail(**kwargs):
        with real_stream(**kwargs) as write:
            yield write
        # every row reached the table inside the transaction, and the COPY ended
        raise psycopg.errors.DiskFull("could not extend file: no space left on device")

    monkeypatch.setattr(services, "points_stream", stream_then_fail)
    with pytest.raises(Exception, match="no space left"):
        upload_create(uploader=contributor, data=ROWS.encode(), file_name="f.csv", params=PARAMS)
    assert FluxPoint.objects.count() == 0
    assert Upload.objects.count() == 0 and StoredFile.objects.count() == 0
    # and the same file is accepted afterwards
    monkeypatch.setattr(services, "points_stream", real_stream)
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


# --- a client that goes away in the middle of an upload -------------------------------

# Over FILE_UPLOAD_MAX_MEMORY_SIZE (5 MB), so Django spools the file to a temporary file.
BIG_ROWS = (
    "time,value,error\n" + "".join(f"{60000 + i * 0.001:.3f},1.0,0.1\n" for i in range(400_000))
).encode()
FIELDS = {
    "instrument": "hollow-hill-1m",
    "source": "tarn-7",
    "band": "r",
    "value_unit": "mJy",
    "time_format": "mjd",
    "time_scale": "tdb",
    "time_reference": "BARYCENTER",
}
BOUNDARY = "fault-test-7d1c"


def _part(name: str, value: str) -> bytes:
    head = f'--{BOUNDARY}\r\nContent-Disposition: form-data; name="{name}"\r\n\r\n'
    return head.encode() + value.encode() + b"\r\n"


def _file_part(data: bytes) -> bytes:
    head = (
        f'--{BOUNDARY}\r\nContent-Disposition: form-data; name="file"; filename="big.csv"\r\n'
        "Content-Type: text/csv\r\n\r\n"
    )
    return head.encode() + data + b"\r\n"


def _body(order: str) -> tuple[bytes, dict[str, int]]:
    """A multipart/form-data body (RFC 7578) and byte offsets where a client may vanish."""
    if order == "fields first":  # as lcstore.client and an HTML form send it
        before = b"".join(_part(k, v) for k, v in FIELDS.items())
        body = before + _file_part(BIG_ROWS) + f"--{BOUNDARY}--\r\n".encode()
        half = len(before) + len(BIG_ROWS) // 2
        cuts = {"in the file": body.index(b"\n", half) + 1}  # whole rows: a readable file
    else:  # curl -F instrument=... -F file=@... -F embargo_until=... keeps the order given
        first = b"".join(_part(k, v) for k, v in FIELDS.items()) + _file_part(BIG_ROWS)
        rest = _part("embargo_until", "2099-01-01T00:00:00Z")
        body = first + rest + f"--{BOUNDARY}--\r\n".encode()
        cuts = {
            # the file part is closed by the next boundary line, then the client goes
            "after the file": len(first) + len(f"--{BOUNDARY}\r\n"),
            # in the middle of the embargo date: "2099-01-01T00:0"
            "in a field after the file": body.index(b"2099-01-01T00:00:00Z") + 15,
        }
    return body, cuts


def _head(url: str, token: str, length: int) -> bytes:
    host = urlsplit(url).netloc
    return (
        f"POST /api/v1/uploads/ HTTP/1.1\r\nHost: {host}\r\n"
        f"Authorization: Token {token}\r\n"
        f"Content-Type: multipart/form-data; boundary={BOUNDARY}\r\n"
        f"Content-Length: {length}\r\nConnection: close\r\n\r\n"
    ).encode()


class _RequestsDone:
    """Counts the requests the live server has finished (Django's request_finished signal)."""

    def __init__(self) -> None:
        self.n = 0
        self.cond = threading.Condition()

    def __call__(self, **kwargs: Any) -> None:
        with self.cond:
            self.n += 1
            self.cond.notify_all()

    def wait_for(self, n: int, timeout: float = 60) -> None:
        with self.cond:
            assert self.cond.wait_for(lambda: self.n >= n, timeout), "the server never finished"


@pytest.fixture
def finished() -> Any:
    counter = _RequestsDone()
    request_finished.connect(counter, weak=False)
    yield counter
    request_finished.disconnect(counter)


@pytest.fixture
def upload_tmp(settings: Any, tmp_path: Path, monkeypatch: Any) -> Path:
    """Where Django spools uploaded files: must be empty after every request.

    A request that failed while reading (connection reset) is logged by
    ``django.request`` with the request in the record; pytest's log capture keeps
    such records, and with them the spooled file, until the test ends. Outside
    the suite nothing keeps them, so that logger is silenced here.
    """
    d = tmp_path / "spool"
    d.mkdir()
    settings.FILE_UPLOAD_TEMP_DIR = str(d)
    monkeypatch.setattr(logging.getLogger("django.request"), "disabled", True)
    return d


def _spooled(d: Path) -> list[Path]:
    """Files left in the spool once the garbage collector has run.

    Django deletes a spooled upload when its temporary file object is closed or
    collected; after a read error the traceback forms a reference cycle, so it
    goes at the next collection, not at once.
    """
    for _ in range(20):
        gc.collect()
        if not (left := list(d.iterdir())):
            return left
        time.sleep(0.1)
    return left


def _send_and_vanish(url: str, token: str, data: bytes, length: int, how: str) -> None:
    u = urlsplit(url)
    s = socket.create_connection((u.hostname, u.port), timeout=60)
    s.sendall(_head(url, token, length) + data)
    if how == "reset":  # an abortive close: RST instead of FIN (SO_LINGER 0)
        s.setsockopt(socket.SOL_SOCKET, socket.SO_LINGER, struct.pack("ii", 1, 0))
    s.close()


def _complete_upload(url: str, token: str) -> httpx.Response:
    return httpx.post(
        f"{url}/api/v1/uploads/",
        data=FIELDS,
        files={"file": ("big.csv", io.BytesIO(BIG_ROWS), "text/csv")},
        headers={"Authorization": f"Token {token}"},
        timeout=120,
    )


@live
@pytest.mark.parametrize(
    ("order", "cut", "how"),
    [
        ("fields first", "in the file", "close"),
        ("fields first", "in the file", "reset"),
        ("file before a field", "after the file", "close"),
        ("file before a field", "in a field after the file", "close"),
    ],
)
def test_a_client_that_disconnects_mid_upload_leaves_no_trace(
    live_server, catalogue, contributor, finished, upload_tmp, order, cut, how
):
    from rest_framework.authtoken.models import Token

    token = Token.objects.create(user=contributor).key
    body, cuts = _body(order)
    assert len(body) > 5 * 1024 * 1024  # spooled to a temporary file, not held in memory
    _send_and_vanish(live_server.url, token, body[: cuts[cut]], len(body), how)
    finished.wait_for(1)
    assert Upload.objects.count() == 0
    assert StoredFile.objects.count() == 0 and FluxPoint.objects.count() == 0
    assert _spooled(upload_tmp) == []  # the spooled part is gone too
    # The server answers the next request, and no checksum lock or row of the
    # abandoned request stands in the way of the same file sent whole.
    r = _complete_upload(live_server.url, token)
    assert r.status_code == 201, r.text
    assert r.json()["counts"]["points"] == 400_000
    assert Upload.objects.count() == 1 and FluxPoint.objects.count() == 400_000
    assert _spooled(upload_tmp) == []


@live
def test_a_client_that_disconnects_after_the_whole_body_gets_it_stored_once(
    live_server, catalogue, contributor, finished, upload_tmp
):
    """A complete request is processed even if nobody reads the answer: the upload is
    stored (all of it, once), and sending it again answers 409 naming that upload, so
    the contributor's script learns its id instead of storing the points twice."""
    from rest_framework.authtoken.models import Token

    token = Token.objects.create(user=contributor).key
    body, _ = _body("fields first")
    _send_and_vanish(live_server.url, token, body, len(body), "close")
    finished.wait_for(1)
    up = Upload.objects.get()
    assert up.n_points == 400_000 and FluxPoint.objects.count() == 400_000
    assert StoredFile.objects.get().size == len(BIG_ROWS)
    r = _complete_upload(live_server.url, token)
    assert r.status_code == 409, r.text
    assert r.json()["existing_upload"] == up.pk
    assert Upload.objects.count() == 1 and FluxPoint.objects.count() == 400_000
    assert _spooled(upload_tmp) == []


# --- a worker that dies in the middle of a job ---------------------------------------


def _pg(autocommit: bool = True) -> psycopg.Connection:
    """A second session on the test database, outside Django."""
    s = connection.settings_dict
    return psycopg.connect(
        host=s["HOST"] or "127.0.0.1",
        port=s["PORT"] or 5432,
        user=s["USER"] or "postgres",
        dbname=s["NAME"],
        autocommit=autocommit,
    )


def _hold_run_lock(job_id: Any) -> psycopg.Connection:
    """A live session holding the job's run lock, as a running worker does."""
    from lcstore.jobs import _lock_key

    conn = _pg()
    assert conn.execute("SELECT pg_try_advisory_lock(%s, %s)", _lock_key(job_id)).fetchone()[0]
    return conn


def _worker(tmp_path: Path, *args: str) -> subprocess.Popen[bytes]:
    s = connection.settings_dict
    url = (
        f"postgres://{s['USER'] or 'postgres'}@{s['HOST'] or '127.0.0.1'}:"
        f"{s['PORT'] or 5432}/{s['NAME']}"
    )
    env = {**os.environ, "DATABASE_URL": url, "PYTHONUNBUFFERED": "1"}
    log = (tmp_path / f"worker-{time.monotonic_ns()}.log").open("wb")
    return subprocess.Popen(
        [
            sys.executable,
            "manage.py",
            "db_worker",
            "--no-startup-delay",
            "--interval",
            "0.1",
            *args,
        ],
        cwd=ROOT,
        env=env,
        stdout=log,
        stderr=subprocess.STDOUT,
    )


def _until(check: Callable[[], Any], timeout: float, what: str) -> Any:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if value := check():
            return value
        time.sleep(0.1)
    raise AssertionError(f"timed out waiting for {what}")


def _waiting_on_a_lock() -> int:
    # From an autocommit session: inside a transaction pg_stat_activity is a snapshot.
    with connection.cursor() as cursor:
        cursor.execute(
            "SELECT count(*) FROM pg_stat_activity WHERE datname = current_database() "
            "AND wait_event_type = 'Lock'"
        )
        return int(cursor.fetchone()[0])


LAGS = {"x": "r", "y": "v", "lag_min": -5, "lag_max": 5, "lag_step": 1}


@pytest.fixture
def two_curves(catalogue, contributor, client_for, upload_file) -> Any:
    """40 nights of R and V for tarn-7, barycentric MJD (enough for a lag function)."""
    c = client_for(contributor)
    for band, phase in (("r", 0.0), ("v", 0.7)):
        rows = "time,value,error\n" + "".join(
            f"{60000 + i},{2 + (i * 7 + phase * 10) % 5 * 0.3:.3f},0.05\n" for i in range(40)
        )
        r = upload_file(c, rows, f"{band}.csv", source="tarn-7", band=band, **FIELDS_NO_BAND)
        assert r.status_code == 201, r.json()
    return c


FIELDS_NO_BAND = {k: v for k, v in FIELDS.items() if k not in ("source", "band")}


@live
def test_a_worker_killed_mid_job_is_failed_by_the_sweep_and_retried(two_curves, tmp_path):
    c = two_curves
    r = c.post(
        "/api/v1/jobs/", {"kind": "lags", "source": "tarn-7", "parameters": LAGS}, format="json"
    )
    assert r.status_code == 202
    job_id = r.json()["id"]
    assert Job.objects.get(pk=job_id).task_id  # queued in the database backend
    # Hold the point table, so the worker's run stops in the middle: it has marked
    # the job running and waits for its first read of the points.
    blocker = _pg(autocommit=False)
    blocker.execute(f"LOCK TABLE {FluxPoint._meta.db_table} IN ACCESS EXCLUSIVE MODE")
    worker = _worker(tmp_path)
    try:
        _until(_waiting_on_a_lock, 60, "the worker to wait inside the job")
        assert Job.objects.get(pk=job_id).state == JobState.RUNNING
        # The worker is alive: the sweep and a poll leave its job alone.
        assert jobs_sweep_stale() == []
        assert c.get(f"/api/v1/jobs/{job_id}/").json()["state"] == "running"
        worker.send_signal(signal.SIGKILL)
        assert worker.wait(timeout=30) == -signal.SIGKILL
    finally:
        if worker.poll() is None:
            worker.kill()
            worker.wait()
        blocker.rollback()
        blocker.close()
    # Nothing could write after the kill: without the sweep it says running for ever.
    job = Job.objects.get(pk=job_id)
    assert job.state == JobState.RUNNING and job.attempts == 1 and job.finished_at is None
    # Once PostgreSQL has ended the dead worker's session, its run lock is free.
    out = io.StringIO()

    def sweep() -> bool:
        call_command("jobs_sweep", stdout=out)
        return Job.objects.get(pk=job_id).state == JobState.FAILED

    _until(sweep, 30, "the sweep to fail the job")
    assert f"failed job {job_id}: {STALE_ERROR}" in out.getvalue()
    body = c.get(f"/api/v1/jobs/{job_id}/").json()
    assert body["state"] == "failed" and body["error"].startswith(STALE_ERROR)
    assert body["finished_at"] is not None
    # The ordinary retry queues it again; a fresh worker runs it to the end.
    r = c.post(f"/api/v1/jobs/{job_id}/retry/")
    assert r.status_code == 202 and r.json()["state"] == "queued"
    again = _worker(tmp_path, "--batch")
    assert again.wait(timeout=120) == 0
    body = c.get(f"/api/v1/jobs/{job_id}/").json()
    assert body["state"] == "done" and body["attempts"] == 2 and body["error"] == ""
    sync = c.get("/api/v1/sources/tarn-7/lags/", LAGS).json()
    assert body["result"]["rows"] == sync["rows"] and body["result"]["peak_lag"] == sync["peak_lag"]


@pytest.mark.django_db
def test_polling_a_job_whose_worker_died_shows_it_failed_and_retry_runs_it(
    catalogue, contributor, client_for, settings, django_capture_on_commit_callbacks
):
    settings.TASKS = {"default": {"BACKEND": "django_tasks.backends.immediate.ImmediateBackend"}}
    # What a killed worker leaves: running, and no session holding the run lock.
    job = Job.objects.create(
        kind="lags",
        owner=contributor,
        source=catalogue["source"],
        parameters={"x": "r", "y": "v"},
        state=JobState.RUNNING,
        attempts=1,
        started_at=timezone.now(),
    )
    c = client_for(contributor)
    listed = c.get("/api/v1/jobs/").json()
    rows = listed["results"] if isinstance(listed, dict) else listed
    assert [(j["id"], j["state"]) for j in rows] == [(str(job.pk), "failed")]
    body = c.get(f"/api/v1/jobs/{job.pk}/").json()
    assert body["error"] == f"{STALE_ERROR} (its database session has ended)"
    with django_capture_on_commit_callbacks(execute=True):
        r = c.post(f"/api/v1/jobs/{job.pk}/retry/")
    assert r.status_code == 202
    body = c.get(f"/api/v1/jobs/{job.pk}/").json()
    # no points: the second run ends with the service's own refusal, not "running"
    assert body["attempts"] == 2 and body["state"] == "failed"
    assert "at least 3 detections" in body["error"]


@pytest.mark.django_db
def test_a_job_whose_worker_session_is_alive_is_failed_only_past_older_than(
    catalogue, contributor, client_for
):
    started = timezone.now() - dt.timedelta(hours=2)
    job = Job.objects.create(
        kind="lags",
        owner=contributor,
        source=catalogue["source"],
        parameters={"x": "r", "y": "v"},
        state=JobState.RUNNING,
        attempts=1,
        started_at=started,
    )
    alive = _hold_run_lock(job.pk)
    try:
        assert jobs_sweep_stale() == []
        assert client_for(contributor).get(f"/api/v1/jobs/{job.pk}/").json()["state"] == "running"
        out = io.StringIO()
        call_command("jobs_sweep", "--older-than", "10800", stdout=out)  # 3 h: not yet
        assert "0 stale job(s)" in out.getvalue()
        call_command("jobs_sweep", "--older-than", "3600", stdout=out)  # a hung worker
        assert "1 stale job(s)" in out.getvalue()
    finally:
        alive.close()
    job.refresh_from_db()
    assert job.state == JobState.FAILED
    assert job.error == f"{STALE_ERROR} (it started more than 3600 s ago)"


@pytest.mark.django_db
def test_a_swept_run_that_comes_back_writes_nothing(catalogue, contributor, monkeypatch):
    import lcstore.jobs as jobs

    job = Job.objects.create(
        kind="lags", owner=contributor, source=catalogue["source"], parameters={"x": "r", "y": "v"}
    )

    def slow_then_done(**kwargs: Any) -> dict[str, Any]:
        # While the run is going, a sweeper decides it has been running too long.
        assert jobs_sweep_stale(older_than=dt.timedelta(0)) == [str(job.pk)]
        kwargs["progress"](0.5)
        return {"peak_lag": 1.0}

    monkeypatch.setattr(jobs, "lags_summary", slow_then_done)
    job_run(str(job.pk))
    job.refresh_from_db()
    assert job.state == JobState.FAILED and job.error.startswith(STALE_ERROR)
    assert job.result is None and job.progress == 0.0 and job.attempts == 1


@pytest.mark.django_db
def test_a_job_still_held_by_an_earlier_run_is_not_run_twice(catalogue, contributor, monkeypatch):
    import lcstore.jobs as jobs

    job = Job.objects.create(
        kind="lags", owner=contributor, source=catalogue["source"], parameters={"x": "r", "y": "v"}
    )
    calls: list[Any] = []
    monkeypatch.setattr(jobs, "lags_summary", lambda **kw: calls.append(kw) or {})
    earlier = _hold_run_lock(job.pk)
    try:
        job_run(str(job.pk))
    finally:
        earlier.close()
    job.refresh_from_db()
    assert calls == [] and job.state == JobState.FAILED and job.attempts == 0
    assert "still going in another worker" in job.error
