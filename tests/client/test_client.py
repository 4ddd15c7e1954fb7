"""The Python client and its command line, against a live test server.

The client runs in the test process and talks HTTP to pytest-django's
``live_server`` (a real threaded WSGI server on PostgreSQL). Tests that need no
server use httpx transports that record or answer requests.

References named beside the checks:
- REFERENCES §4 binning example, recomputed with astropy's
  ``aggregate_downsample`` of w = 1/σ² and wf = f/σ² (Bevington & Robinson);
- REFERENCES §3: MJD = JD − 2400000.5;
- unit conversions with ``astropy.units``;
- RFC 7578 multipart/form-data read back with the standard library's MIME
  parser (``email``), and by Django's own parser on the live server;
- flux–flux statistics with ``scipy.stats.pearsonr``; F_var with Vaughan et
  al. 2003 eq. 10 written out with numpy (REFERENCES §5).
"""

from __future__ import annotations

import email.parser
import email.policy
import json
import os
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import numpy as np
import pytest
from astropy import units as u
from astropy.table import Table
from astropy.time import Time
from astropy.timeseries import TimeSeries, aggregate_downsample
from django.urls import Resolver404, resolve
from scipy import stats

import lcstore.client as lcclient
from lcstore.client import Client, JobFailed, LcstoreError, curve_time, main

ROOT = Path(__file__).resolve().parents[2]

# Live-server tests commit their data (transactional), so the roles created by a
# data migration are restored before each of them (serialized_rollback).
live = pytest.mark.django_db(transaction=True, serialized_rollback=True)

BASE = dict(value_unit="mJy", time_format="mjd", time_scale="tdb", time_reference="BARYCENTER")
# REFERENCES §4 example: MJD 60000 + [.1, .2, .3, 1.1, 1.6, 2.5], 1-day bins
REF_T = 60000 + np.array([0.1, 0.2, 0.3, 1.1, 1.6, 2.5])
REF_F = np.array([1.0, 1.2, 0.8, 2.0, 2.2, 3.0])
REF_S = np.array([0.1, 0.2, 0.1, 0.1, 0.1, 0.3])
UNBINNED = ["band", "time", "value", "error", "upper_limit", "instrument", "upload"]
BINNED = ["band", "time", "time_lo", "time_hi", "value", "error", "upper_limit", "n"]


def _csv(t: np.ndarray, f: np.ndarray, s: np.ndarray) -> str:
    rows = "\n".join(f"{a:.6f},{float(b)!r},{float(c)!r}" for a, b, c in zip(t, f, s, strict=True))
    return "time,value,error\n" + rows + "\n"


def _reference_bins() -> tuple[np.ndarray, np.ndarray]:
    """Weighted 1-day bins with astropy's aggregate_downsample (REFERENCES §4 oracle)."""
    ts = TimeSeries(
        time=Time(REF_T, format="mjd", scale="tdb"),
        data={"w": 1 / REF_S**2, "wf": REF_F / REF_S**2},
    )
    agg = aggregate_downsample(
        ts,
        time_bin_size=1 * u.d,
        time_bin_start=Time(60000.0, format="mjd", scale="tdb"),
        n_bins=3,
        aggregate_func=np.sum,
    )
    w = np.asarray(agg["w"], dtype=float)
    return np.asarray(agg["wf"], dtype=float) / w, w**-0.5


def _route_exists(path: str) -> bool:
    try:
        resolve(path)
    except Resolver404:
        return False
    return True


@pytest.fixture
def token(contributor: Any) -> str:
    from rest_framework.authtoken.models import Token

    return Token.objects.create(user=contributor).key


@pytest.fixture
def api(live_server: Any, catalogue: dict[str, Any], token: str) -> Iterator[Client]:
    with Client(live_server.url, token, timeout=30) as c:
        yield c


@pytest.fixture
def ref_curve(catalogue: dict[str, Any], contributor: Any, client_for: Any, upload_file: Any):
    """The REFERENCES §4 R-band points and three gamma-ray points, one an upper limit.

    Loaded through Django's test client (not through the client under test).
    """
    c = client_for(contributor)
    r = upload_file(
        c,
        _csv(REF_T, REF_F, REF_S),
        "r.csv",
        source="tarn-7",
        band="r",
        instrument="hollow-hill-1m",
        **BASE,
    )
    assert r.status_code == 201, r.json()
    g = "time,value,error,upper_limit\n60000.5,1e-6,1e-7,0\n60001.5,2e-6,2e-7,0\n60002.5,5e-7,,1\n"
    r = upload_file(
        c,
        g,
        "g.csv",
        source="tarn-7",
        band="gamma",
        instrument="wren-lat",
        **{**BASE, "value_unit": "ph/(cm2 s)"},
    )
    assert r.status_code == 201, r.json()
    return c


# -- without a server ----------------------------------------------------------------------


def test_client_imports_without_django() -> None:
    """A fresh interpreter without DJANGO_SETTINGS_MODULE imports the client, not Django."""
    env = {k: v for k, v in os.environ.items() if k != "DJANGO_SETTINGS_MODULE"}
    code = (
        "import sys, lcstore.client\n"
        "bad = sorted(k for k in sys.modules if k.split('.')[0] in ('django', 'rest_framework')"
        " or k in ('lcstore.models', 'lcstore.settings'))\n"
        "print(bad)\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=ROOT, env=env, capture_output=True, text=True, check=True
    )
    assert out.stdout.strip() == "[]"


class _Recorder(httpx.BaseTransport):
    """Reads the request body chunk by chunk, noting how far the progress report had got."""

    def __init__(self, progress_calls: list[tuple[float, float]]) -> None:
        self.progress_calls = progress_calls
        self.chunks: list[tuple[int, int]] = []  # (chunk length, progress calls so far)
        self.request: httpx.Request | None = None
        self.body = b""

    def handle_request(self, request: httpx.Request) -> httpx.Response:
        self.request = request
        parts = []
        for chunk in request.stream:  # type: ignore[union-attr]
            self.chunks.append((len(chunk), len(self.progress_calls)))
            parts.append(chunk)
        self.body = b"".join(parts)
        return httpx.Response(201, json={"id": 1, "counts": {"points": 3}})


def test_upload_body_is_streamed_multipart(tmp_path: Path, monkeypatch: Any) -> None:
    monkeypatch.setattr(lcclient, "CHUNK_SIZE", 1000)
    content = ("time,value,error\n" + "60000.1,1.0,0.1\n" * 400).encode()  # 6.4 kB
    path = tmp_path / 'night "4".csv'
    path.write_bytes(content)
    calls: list[tuple[float, float]] = []
    rec = _Recorder(calls)
    with Client("http://lcstore.test", "k", transport=rec) as c:
        record = c.upload(
            path,
            source="tarn-7",
            band="r",
            instrument="hollow-hill-1m",
            columns={"time": "time"},
            embargo_until=None,
            progress=lambda done, total: calls.append((done, total)),
        )
    assert record["id"] == 1
    req = rec.request
    assert req is not None and req.url == "http://lcstore.test/api/v1/uploads/"
    assert req.headers["Authorization"] == "Token k"
    assert int(req.headers["Content-Length"]) == len(rec.body)
    assert "Transfer-Encoding" not in req.headers
    # streamed: the file went in pieces of at most CHUNK_SIZE, and the progress report
    # after piece k came only once the transport had taken piece k
    file_chunks = rec.chunks[1:-1]
    assert len(file_chunks) == 7 and all(n <= 1000 for n, _ in file_chunks)
    assert [seen for _, seen in file_chunks] == list(range(7))
    assert calls[-1] == (len(content), len(content))
    assert [d for d, _ in calls] == sorted(d for d, _ in calls)
    # RFC 7578 body read back with the standard library's MIME parser
    head = f"Content-Type: {req.headers['Content-Type']}\r\n\r\n".encode()
    msg = email.parser.BytesParser(policy=email.policy.HTTP).parsebytes(head + rec.body)
    parts = {p.get_param("name", header="content-disposition"): p for p in msg.iter_parts()}
    assert set(parts) == {"source", "band", "instrument", "columns", "file"}
    assert parts["band"].get_payload(decode=True) == b"r"
    assert json.loads(parts["columns"].get_payload(decode=True)) == {"time": "time"}
    assert parts["file"].get_filename() == "night %224%22.csv"
    assert parts["file"].get_payload(decode=True) == content


def _jobs_transport(states: list[dict[str, Any]], seen: list[str]) -> httpx.MockTransport:
    it = iter(states)

    def handler(request: httpx.Request) -> httpx.Response:
        seen.append(f"{request.method} {request.url.path}")
        if request.method == "POST":
            assert json.loads(request.content) == {
                "kind": "lags",
                "source": "tarn-7",
                "parameters": {"x": "r", "y": "gamma", "method": "dcf", "n_sig": "500"},
            }
            return httpx.Response(202, json={}, headers={"Location": "/api/v1/jobs/ab12/"})
        return httpx.Response(200, json={"id": "ab12", **next(it)})

    return httpx.MockTransport(handler)


def test_background_lags_poll_the_job_until_done_with_a_progress_bar(capsys: Any) -> None:
    states = [
        {"state": "queued", "progress": 0.0},
        {"state": "running", "progress": 0.5},
        {"state": "done", "progress": 1.0, "result": {"peak_lag": 3.0}},
    ]
    seen: list[str] = []
    with Client("http://lcstore.test/api/v1/", "k", transport=_jobs_transport(states, seen)) as c:
        result = c.lags("tarn-7", "r", "gamma", background=True, n_sig=500, poll=0.0)
    assert result == {"peak_lag": 3.0}
    assert seen == ["POST /api/v1/jobs/"] + ["GET /api/v1/jobs/ab12/"] * 3
    err = capsys.readouterr().err
    assert "job ab12" in err and "100%" in err


@pytest.mark.parametrize(
    ("last", "error", "match"),
    [
        ({"state": "failed", "error": "need at least 3 detections"}, JobFailed, "at least 3"),
        ({"state": "running", "progress": 0.2}, TimeoutError, "still running after 0 s"),
    ],
)
def test_wait_reports_failed_and_late_jobs(last: dict[str, Any], error: type, match: str) -> None:
    def handler(request: httpx.Request) -> httpx.Response:
        return httpx.Response(200, json={"id": "ab12", **last})

    with Client("http://lcstore.test", "k", transport=httpx.MockTransport(handler)) as c:
        with pytest.raises(error, match=match):
            c.wait("ab12", poll=0.0, timeout=0.0, progress=False)


def test_errors_without_json_and_without_a_server() -> None:
    def proxy(request: httpx.Request) -> httpx.Response:
        return httpx.Response(502, text="<html>bad gateway</html>")

    with Client("http://lcstore.test", None, transport=httpx.MockTransport(proxy)) as c:
        with pytest.raises(LcstoreError, match="Bad Gateway") as exc:
            c.sources()
    assert exc.value.status == 502 and exc.value.errors == []

    def down(request: httpx.Request) -> httpx.Response:
        raise httpx.ConnectError("connection refused", request=request)

    with Client("http://lcstore.test", None, transport=httpx.MockTransport(down)) as c:
        with pytest.raises(LcstoreError, match="could not talk to") as exc:
            c.source("tarn-7")
    assert exc.value.status is None


# -- against the live server ---------------------------------------------------------------


@live
def test_pull_gives_a_table_with_units_and_time_metadata_or_a_dataframe(
    api: Client, ref_curve: Any
) -> None:
    t = api.lightcurve("tarn-7", bands=["r"], bin="1d", unit="mJy")
    assert isinstance(t, Table)
    assert t.colnames == BINNED
    value, error = _reference_bins()  # REFERENCES §4, astropy aggregate_downsample
    np.testing.assert_allclose(t["value"], value, rtol=1e-9)
    np.testing.assert_allclose(t["error"], error, rtol=1e-9)
    assert t["value"].unit == u.mJy and t["error"].unit == u.mJy
    assert t["time"].unit == u.d
    assert list(t["n"]) == [3, 2, 1]
    assert t.meta["TIMESYS"] == "TDB" and t.meta["TREFPOS"] == "BARYCENTER"
    assert t.meta["source"] == "tarn-7" and t.meta["band_units"] == {"r": "mJy"}
    assert curve_time(t).scale == "tdb"
    np.testing.assert_allclose(curve_time(t).mjd, [60000.5, 60001.5, 60002.5])
    # JD: REFERENCES §3, MJD = JD - 2400000.5; the same instants as astropy Time
    tj = api.lightcurve("tarn-7", bands="r", time_format="jd")
    np.testing.assert_allclose(np.asarray(tj["time"]), REF_T + 2400000.5, rtol=0, atol=1e-8)
    np.testing.assert_allclose(curve_time(tj).mjd, REF_T, rtol=0, atol=1e-8)

    # one unit per band; the server's conversion matches astropy's
    df = api.lightcurve("tarn-7", bands="r,gamma", unit=["Jy", "ph/(cm2 s)"], as_pandas=True)
    assert list(df.columns) == UNBINNED
    assert len(df) == 9 and df["upper_limit"].dtype == bool
    r = df[df["band"] == "r"]
    np.testing.assert_allclose(r["value"], (REF_F * u.mJy).to_value(u.Jy), rtol=1e-12)
    gamma = df[df["band"] == "gamma"]
    assert gamma["upper_limit"].tolist() == [False, False, True]
    assert np.isnan(gamma["error"].iloc[-1])  # a limit without an error stays missing
    assert set(df.attrs["meta"]["band_units"]) == {"r", "gamma"}
    assert df.attrs["meta"]["band_units"]["r"] == "Jy"
    assert df.attrs["units"]["time"] == "d" and "value" not in df.attrs["units"]
    assert curve_time(df).mjd[0] == pytest.approx(REF_T[0], abs=1e-9)


@live
def test_sources_search_and_refusals_with_the_servers_own_message(
    api: Client, live_server: Any, token: str
) -> None:
    from astropy.coordinates import SkyCoord

    from lcstore.models import Source

    for i in range(5):
        Source.objects.create(slug=f"fen-{i}", name=f"Fen {i}", ra=10.0 + i, dec=-5.0)
    assert {s["slug"] for s in api.sources()} == {"tarn-7"} | {f"fen-{i}" for i in range(5)}
    assert [s["slug"] for s in api.sources(q="TRN J1000")] == ["tarn-7"]  # alias
    # cone of 2.5 deg around (11, -5): the expected members from astropy's separation
    centre = SkyCoord(11.0, -5.0, unit="deg")
    expected = {
        f"fen-{i}"
        for i in range(5)
        if centre.separation(SkyCoord(10.0 + i, -5.0, unit="deg")).deg <= 2.5
    }
    assert {s["slug"] for s in api.sources(ra=11.0, dec=-5.0, radius=2.5)} == expected
    # pagination is followed: a page of 2 records at a time
    paged = api._paged("sources/", {"page_size": "2"})
    assert len(paged) == 6 and len({s["slug"] for s in paged}) == 6
    assert api.source("tarn-7")["aliases"] == ["TRN J1000+2000"]

    def raw(path: str, key: str | None = token) -> dict[str, Any]:
        headers = {"Authorization": f"Token {key}"} if key else {}
        return httpx.get(f"{live_server.url}/api/v1/{path}", headers=headers).json()

    with pytest.raises(LcstoreError) as exc:
        api.source("no-such-source")
    assert exc.value.status == 404
    assert exc.value.message == raw("sources/no-such-source/")["detail"]
    with pytest.raises(LcstoreError, match="gamma") as exc:
        api.lightcurve("tarn-7", bands="gamma", unit="mag")
    assert exc.value.status == 400
    assert exc.value.message == raw("sources/tarn-7/lightcurve/?bands=gamma&unit=mag")["detail"]
    with pytest.raises(LcstoreError, match="cone search needs all of"):
        api.sources(ra=11.0)
    with Client(live_server.url, None) as anonymous:
        with pytest.raises(LcstoreError) as exc:
            anonymous.sources()
    assert exc.value.status in (401, 403)
    assert exc.value.message == raw("sources/", None)["detail"]


@live
def test_upload_with_progress_rows_refused_conflict_and_retract(
    api: Client, tmp_path: Path, monkeypatch: Any, capsys: Any
) -> None:
    from lcstore.models import Upload

    # a refused file: the server's message and every row problem, nothing stored
    bad = tmp_path / "bad.csv"
    bad.write_text("time,value,error\n60000.0,1.0,0.1\n60001.0,abc,0.1\n60002.0,1.0,-1\n")
    with pytest.raises(LcstoreError, match="nothing was stored") as exc:
        api.upload(bad, source="tarn-7", band="r", instrument="hollow-hill-1m", **BASE)
    e = exc.value
    assert e.status == 400
    got = {(x["row"], x["column"], x["message"].split(" (")[0]) for x in e.errors}
    assert got == {(3, "value", "value is not a number"), (4, "error", "error must be positive")}
    assert "row 3, column value" in str(e)
    assert Upload.objects.count() == 0
    capsys.readouterr()

    # a larger file in pieces, with a tqdm bar on stderr
    monkeypatch.setattr(lcclient, "CHUNK_SIZE", 64 * 1024)
    n = 8000
    t = 60000 + np.arange(n) * 0.001
    big = tmp_path / "big-night.csv"
    big.write_text(_csv(t, np.full(n, 1.5), np.full(n, 0.1)))
    record = api.upload(big, source="tarn-7", band="r", instrument="hollow-hill-1m", **BASE)
    assert record["counts"]["points"] == n and record["file_name"] == "big-night.csv"
    assert record["size"] == big.stat().st_size
    err = capsys.readouterr().err
    assert "big-night.csv" in err and "100%" in err  # the tqdm bar, completed

    # the same file again: 409 naming the upload
    with pytest.raises(LcstoreError) as exc:
        api.upload(
            big, source="tarn-7", band="r", instrument="hollow-hill-1m", progress=False, **BASE
        )
    assert exc.value.status == 409 and exc.value.body["existing_upload"] == record["id"]

    # a callable gets (bytes sent, total) after each piece of the file
    small = tmp_path / "second.csv"
    small.write_text(_csv(t[:3000] + 100, np.full(3000, 2.0), np.full(3000, 0.1)))
    calls: list[tuple[float, float]] = []
    second = api.upload(
        small,
        source="tarn-7",
        band="r",
        instrument="hollow-hill-1m",
        progress=lambda done, total: calls.append((done, total)),
        **BASE,
    )
    size = small.stat().st_size
    assert len(calls) == -(-size // (64 * 1024)) and calls[-1] == (size, size)

    retracted = api.retract(record["id"], "superseded by a better reduction")
    assert retracted["status"] == "retracted"
    assert retracted["retraction_reason"] == "superseded by a better reduction"
    left = api.lightcurve("tarn-7", bands="r")
    assert len(left) == 3000 and set(left["upload"]) == {second["id"]}
    assert [x["id"] for x in api.uploads(status="retracted")] == [record["id"]]


@pytest.fixture
def campaign(catalogue: dict[str, Any], contributor: Any, client_for: Any, upload_file: Any):
    """20 daily R-band points and gamma-ray points following F_gamma = 1e-6 F_R^1.5."""
    k = np.arange(20)
    r = 1.0 + 0.5 * np.sin(k / 3.0) + 0.02 * k
    gamma = 1e-6 * r**1.5
    c = client_for(contributor)
    for band, t, f, unit in (
        ("r", 60000.3 + k, r, "mJy"),
        ("gamma", 60000.6 + k, gamma, "ph/(cm2 s)"),
    ):
        resp = upload_file(
            c,
            _csv(t, f, 0.05 * f),
            f"{band}.csv",
            source="tarn-7",
            band=band,
            instrument="hollow-hill-1m" if band == "r" else "wren-lat",
            **{**BASE, "value_unit": unit},
        )
        assert resp.status_code == 201, resp.json()
    return {"client": c, "r": r, "gamma": gamma}


@live
def test_computed_summaries_and_a_background_job(
    api: Client, campaign: dict[str, Any], settings: Any, capsys: Any
) -> None:
    for path in ("correlation", "lags", "variability", "sed"):
        if not _route_exists(f"/api/v1/sources/tarn-7/{path}/"):
            pytest.skip(f"the {path}/ endpoint is not wired in api/urls.py yet")
    r, gamma = campaign["r"], campaign["gamma"]
    corr = api.correlation("tarn-7", "r", "gamma", bin="1d", n_boot=50)
    assert corr["n_pairs"] == 20
    ref = stats.pearsonr(r, gamma)  # scipy on the same pairs
    assert corr["pearson_r"] == pytest.approx(ref.statistic, rel=1e-9)
    assert corr["slope"] == pytest.approx(1.5, rel=1e-9)  # an exact power law F_y = F_x^1.5
    var = api.variability("tarn-7", bands=["r"])
    (entry,) = var["bands"]
    # Vaughan et al. 2003 eq. 10: F_var = sqrt((S^2 - <sigma^2>) / mean^2), REFERENCES §5
    s2, mse = np.var(r, ddof=1), np.mean((0.05 * r) ** 2)
    assert entry["fvar"] == pytest.approx(np.sqrt((s2 - mse) / np.mean(r) ** 2), rel=1e-9)
    # lags and SED: the client returns exactly what the API answers
    django_client = campaign["client"]
    params = dict(method="dcf", lag_min=-5, lag_max=5, lag_step=1)
    lags = api.lags("tarn-7", "r", "gamma", **params)
    direct = django_client.get(
        "/api/v1/sources/tarn-7/lags/?x=r&y=gamma&method=dcf&lag_min=-5&lag_max=5&lag_step=1"
    ).json()
    assert lags == direct and lags["rows"]["lag"] == [float(v) for v in range(-5, 6)]
    sed = api.sed("tarn-7", at=60005.5, window=1.0)
    assert sed == django_client.get("/api/v1/sources/tarn-7/sed/?at=60005.5&window=1.0").json()
    assert {row["band"] for row in sed["rows"]} == {"r", "gamma"}

    if not _route_exists("/api/v1/jobs/"):
        pytest.skip("the jobs/ endpoint is not wired in api/urls.py yet")
    # run queued tasks at once, in the server thread (no worker process in the tests)
    settings.TASKS = {"default": {"BACKEND": "django_tasks.backends.immediate.ImmediateBackend"}}
    capsys.readouterr()
    assert api.lags("tarn-7", "r", "gamma", background=True, poll=0.05, **params) == lags
    assert "100%" in capsys.readouterr().err
    job = api.submit_job("lags", "tarn-7", x="r", y="nope")
    with pytest.raises(JobFailed, match="nope"):
        api.wait(job["id"], poll=0.05, progress=False)


@live
def test_command_line_pull_and_upload(
    api: Client,
    ref_curve: Any,
    live_server: Any,
    token: str,
    tmp_path: Path,
    monkeypatch: Any,
    capsys: Any,
) -> None:
    out = tmp_path / "out.csv"
    argv = ["--url", live_server.url, "--token", token, "pull", "tarn-7", "--bands", "r"]
    assert main([*argv, "--bin", "1d", "--unit", "mJy", "--format", "csv", "-o", str(out)]) == 0
    lines = out.read_text().splitlines()
    assert lines[0] == ",".join(BINNED)  # DESIGN.md §4 binned CSV columns
    value, _ = _reference_bins()  # REFERENCES §4
    np.testing.assert_allclose([float(x.split(",")[4]) for x in lines[1:]], value, rtol=1e-9)
    assert "wrote" in capsys.readouterr().err
    # url and token from the environment; the record as JSON on stdout
    monkeypatch.setenv("LCSTORE_URL", live_server.url)
    monkeypatch.setenv("LCSTORE_TOKEN", token)
    good = tmp_path / "v.csv"
    good.write_text("time,value\n60003.0,15.0\n60004.0,15.2\n")
    common = ["--source", "tarn-7", "--band", "v", "--instrument", "hollow-hill-1m"]
    system = ["--time-format", "mjd", "--time-scale", "tdb", "--time-reference", "BARYCENTER"]
    status = main(["upload", str(good), *common, "--value-unit", "mag", *system, "--no-progress"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    assert json.loads(captured.out)["counts"]["points"] == 2
    assert "accepted: 2 points" in captured.err
    # V = 15 mag -> 3.636 mJy (Bessell, Castelli & Plez 1998 zero point; REFERENCES §1)
    v = api.lightcurve("tarn-7", bands="v", unit="mJy")
    assert v["value"][0] == pytest.approx(3636e3 * 10 ** (-0.4 * 15.0), rel=1e-9)
    bad = tmp_path / "bad.csv"
    bad.write_text("time,value\n60003.0,oops\n")
    assert main(["upload", str(bad), *common, "--value-unit", "mag", *system]) == 1
    err = capsys.readouterr().err
    assert "nothing was stored" in err and "row 2, column value" in err
