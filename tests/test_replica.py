"""Reads on a real streaming standby, writes on the primary, read-your-writes (lcstore/dbrouter.py).

The test builds its own pair from the installed PostgreSQL binaries, so the
shared server at 5432 is neither copied nor reconfigured (it refuses replication
connections, and a base backup of it would carry every other test database):

- a primary cluster (``pg_createcluster``, trust authentication, which also
  admits replication connections from this host), started;
- a hot standby: a second cluster whose data directory is emptied and filled
  by ``pg_basebackup -R -X stream -c fast`` from the primary, started;
- ``pg_dropcluster --stop`` removes both in a finaliser, whatever happens.

The scenario runs in a child process (``python -m tests.test_replica``) with
``DATABASE_URL`` on the primary and ``DATABASE_REPLICA_URL`` on the standby, so
the settings wiring is exercised as in production; the database it migrates is
created on the primary after the standby started, so physical replication
carries it across. The child answers what it observed as JSON; this module
asserts. Replay on the standby is paused (``pg_wal_replay_pause()``) to make
lag certain, so a read that misses the newest upload was served by the standby
and one that has it was served by the primary. The raw ``COPY … TO STDOUT`` of
the points passes by Django's query log, so while replay is paused the child
also adds one point to an upload both servers know, on the primary only: the
standby's answer lacks it, and a count that has it means the COPY ran on the
primary even though the list of visible uploads came from the standby. Which connection ran which SQL
is recorded with Django's ``CaptureQueriesContext`` on each alias, and
``pg_is_in_recovery()`` tells the standby from the primary (PostgreSQL manual,
"System Administration Functions"). Last, the child stops the standby with
``pg_ctlcluster`` while it keeps a connection to it, reads through the primary,
starts the standby again and reads from it once the retry window has passed.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import socket
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import pytest

ROOT = Path(__file__).resolve().parent.parent
STICKY_SECONDS = 2.0  # the child's LCSTORE_REPLICA_STICKY_SECONDS (short, to keep the test fast)
RETRY_SECONDS = 1.0  # the child's LCSTORE_REPLICA_RETRY_SECONDS
TOOLS = ("pg_createcluster", "pg_ctlcluster", "pg_dropcluster", "pg_basebackup")
DB_NAME = "lcrepl"


# ---------------------------------------------------------------- the pair


def _pg_version() -> str | None:
    """The newest installed PostgreSQL whose binaries include initdb and pg_basebackup."""
    base = Path("/usr/lib/postgresql")
    versions = [
        p.name
        for p in base.glob("*")
        if (p / "bin" / "initdb").exists() and (p / "bin" / "pg_basebackup").exists()
    ]
    return max(versions, key=lambda v: [int(x) for x in re.findall(r"\d+", v)], default=None)


def _why_not() -> str | None:
    missing = [t for t in TOOLS if shutil.which(t) is None]
    if missing:
        return f"needs Debian's postgresql-common tools; missing: {', '.join(missing)}"
    if _pg_version() is None:
        return "no PostgreSQL server binaries (initdb, pg_basebackup) under /usr/lib/postgresql"
    if os.geteuid() != 0:
        import pwd

        if pwd.getpwuid(os.geteuid()).pw_name != "postgres":
            return "creating clusters needs root or the postgres account"
    elif shutil.which("runuser") is None:
        return "needs runuser to run pg_basebackup as the postgres account"
    return None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _run(cmd: list[str], *, as_postgres: bool = False, timeout: float = 60) -> str:
    if as_postgres and os.geteuid() == 0:
        cmd = ["runuser", "-u", "postgres", "--", *cmd]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout)
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)} failed ({done.returncode}): {done.stderr.strip()}")
    return done.stdout


def _data_dir(version: str, name: str) -> Path:
    out = _run(["pg_lsclusters", "--no-header", version, name])
    return Path(out.split()[5])


@pytest.fixture(scope="module")
def pair(request: pytest.FixtureRequest) -> dict[str, Any]:
    reason = _why_not()
    if reason:
        pytest.skip(reason)
    version = _pg_version()
    assert version is not None
    tag = f"lcrepl{os.getpid()}"
    primary, standby = f"{tag}p", f"{tag}s"
    created: list[str] = []
    t0 = time.perf_counter()

    def drop() -> None:
        # Always, even after a failure half-way; both at once (each waits for its server).
        procs = [
            subprocess.Popen(
                ["pg_dropcluster", "--stop", version, name],
                stdout=subprocess.DEVNULL,
                stderr=subprocess.DEVNULL,
            )
            for name in created
        ]
        for p in procs:
            p.wait(timeout=60)

    request.addfinalizer(drop)
    ports = {}
    fast = ["-o", "fsync=off"]  # the default listen_addresses is localhost
    initdb = ["--", "--auth=trust", "--no-sync"]
    making = []
    for name in (primary, standby):  # both at once: initdb dominates
        ports[name] = _free_port()
        created.append(name)
        making.append(
            subprocess.Popen(
                ["pg_createcluster", version, name, "--port", str(ports[name]), *fast, *initdb],
                stdout=subprocess.DEVNULL,
                stderr=subprocess.PIPE,
                text=True,
            )
        )
    for name, proc in zip((primary, standby), making, strict=True):
        _, err = proc.communicate(timeout=120)
        if proc.returncode != 0:
            raise RuntimeError(f"pg_createcluster {version} {name} failed: {err.strip()}")
    start = ["pg_ctlcluster", "--skip-systemctl-redirect", version]
    _run([*start, primary, "start"])
    data = _data_dir(version, standby)
    for child in data.iterdir():  # the standby's own initdb goes; the base backup replaces it
        shutil.rmtree(child) if child.is_dir() else child.unlink()
    _run(
        [
            f"/usr/lib/postgresql/{version}/bin/pg_basebackup",
            "-h", "127.0.0.1", "-p", str(ports[primary]), "-U", "postgres",
            "-D", str(data), "-R", "-X", "stream", "-c", "fast", "--no-sync",
        ],
        as_postgres=True,
    )  # fmt: skip
    # The standby starts while the scenario's database is created on the primary (so
    # replication carries it across) and while the child process boots; the child waits
    # for the standby to accept connections before it reads from it.
    starting = subprocess.Popen(
        [*start, standby, "start"], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True
    )
    request.addfinalizer(lambda: starting.poll() is None and starting.wait(timeout=60))
    _run(
        [f"/usr/lib/postgresql/{version}/bin/createdb", "-h", "127.0.0.1"]
        + ["-p", str(ports[primary]), "-U", "postgres", DB_NAME]
    )
    return {
        "version": version,
        "standby_cluster": standby,
        "primary_port": ports[primary],
        "standby_port": ports[standby],
        "standby_start": starting,
        "setup_seconds": time.perf_counter() - t0,
    }


@pytest.fixture(scope="module")
def observed(pair: dict[str, Any]) -> dict[str, Any]:
    env = {
        **os.environ,
        "DJANGO_SETTINGS_MODULE": "lcstore.settings",
        "DATABASE_URL": f"postgres://postgres@127.0.0.1:{pair['primary_port']}/{DB_NAME}",
        "DATABASE_REPLICA_URL": f"postgres://postgres@127.0.0.1:{pair['standby_port']}/{DB_NAME}",
        "LCSTORE_REPLICA_STICKY_SECONDS": str(int(STICKY_SECONDS)),
        "LCSTORE_REPLICA_RETRY_SECONDS": str(int(RETRY_SECONDS)),
        "LCREPL_STANDBY_CLUSTER": f"{pair['version']} {pair['standby_cluster']}",
        "LCSTORE_PUBLIC_READ": "1",
        "PYTHONDONTWRITEBYTECODE": "1",
    }
    env.pop("REDIS_URL", None)  # one process: the local-memory cache holds the marks
    t0 = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-m", "tests.test_replica"],
        cwd=ROOT,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
    )
    starting = pair["standby_start"]
    _, start_err = starting.communicate(timeout=60)
    assert starting.returncode == 0, f"the standby did not start: {start_err.strip()}"
    assert done.returncode == 0, f"scenario failed:\n{done.stderr[-6000:]}"
    facts = json.loads(done.stdout.strip().splitlines()[-1])
    facts["scenario_seconds"] = time.perf_counter() - t0
    down = {
        k: round(v["seconds"], 3)
        for k, v in facts["down"].items()
        if isinstance(v, dict) and "seconds" in v
    }
    print(
        f"\nreplica test: pair set up in {pair['setup_seconds']:.1f} s, "
        f"scenario {facts['scenario_seconds']:.1f} s; child timeline (s): {facts['timeline']}; "
        f"reads with the standby down (s): {down}"
    )
    return facts


# ---------------------------------------------------------------- the checks


def _data_sql(sqls: list[str]) -> list[str]:
    """Statements on lcstore's own tables (accounts and tokens are always read on the primary)."""
    return [s for s in sqls if '"lcstore_' in s]


def test_the_aliases_are_the_primary_and_a_standby(observed: dict[str, Any]) -> None:
    wiring = observed["wiring"]
    assert observed["in_recovery"] == {"default": False, "replica": True}
    assert wiring["routers"] == ["lcstore.dbrouter.PrimaryReplicaRouter"]
    assert wiring["middleware_last"] == "lcstore.dbrouter.ReplicaRoutingMiddleware"
    assert wiring["replica_test"] == {"MIRROR": "default"}
    assert "default_transaction_read_only=on" in wiring["replica_options"]
    # The standby holds the database created and migrated on the primary after it started.
    assert observed["standby_tables"] > 10


def test_reads_of_others_are_served_by_the_standby(observed: dict[str, Any]) -> None:
    n0 = observed["n0"]
    anon = observed["steps"]["anonymous_before"]
    assert anon["status"] == 200 and anon["rows"] == n0
    assert _data_sql(anon["standby"]), "the anonymous read ran no query on the standby"
    assert anon["primary"] == [], "an anonymous read touched the primary"


def test_writes_go_to_the_primary(observed: dict[str, Any]) -> None:
    post = observed["steps"]["upload"]
    assert post["status"] == 201, post
    assert post["standby"] == [], "a write request read from the standby"
    writes = [s for s in post["primary"] if s.lstrip().upper().startswith(("INSERT", "UPDATE"))]
    assert any('INSERT INTO "lcstore_upload"' in s for s in writes)
    # The checksum lock of services.upload_create runs on the primary, in its transaction.
    assert any("pg_advisory_xact_lock" in s for s in post["primary"])
    assert observed["mark_set"], "no read-your-writes mark after the upload"


def test_the_uploader_reads_its_upload_while_the_standby_lags(observed: dict[str, Any]) -> None:
    n0, n1, extra = observed["n0"], observed["n1"], observed["n_extra"]
    steps = observed["steps"]
    assert observed["replay_paused"] in {"paused", "pause requested"}
    mine = steps["uploader_right_after"]
    assert mine["rows"] == n0 + extra + n1, (
        "read-your-writes: the uploader's read missed the upload"
    )
    assert mine["standby"] == [] and _data_sql(mine["primary"])
    # Others are still served by the paused standby, which has not replayed the upload:
    # proof that the lag was real and that the uploader's answer came from the primary.
    for who in ("other_user_lagging", "anonymous_lagging"):
        step = steps[who]
        # n0 + extra would mean: visible uploads from the standby, their points from the primary.
        assert step["rows"] == n0, f"{who}: {step['rows']} rows"
        assert _data_sql(step["standby"]) and not _data_sql(step["primary"]), who


def test_after_the_window_the_uploader_reads_the_standby_again(observed: dict[str, Any]) -> None:
    n0, n1, extra = observed["n0"], observed["n1"], observed["n_extra"]
    late = observed["steps"]["uploader_after_window"]
    assert late["after_write_s"] >= STICKY_SECONDS
    assert late["rows"] == n0, "after the window the uploader should read the (paused) standby"
    assert _data_sql(late["standby"]) and not _data_sql(late["primary"])
    caught_up = observed["steps"]["anonymous_after_replay"]
    assert caught_up["rows"] == n0 + extra + n1 and _data_sql(caught_up["standby"])


def test_transactions_and_background_code_read_the_primary(observed: dict[str, Any]) -> None:
    r = observed["router"]
    assert r["get_request"] == "replica" and r["get_request_read_connection"] == "replica"
    assert r["get_request_in_atomic"] == "default"
    assert r["get_request_in_atomic_read_connection"] == "default"
    assert r["post_request"] == "default"
    assert r["outside_request"] == "default"  # workers, commands, the shell
    assert r["accounts_in_get_request"] == "default"


def test_cached_answers_are_keyed_by_the_version_of_the_server_that_answered(
    observed: dict[str, Any],
) -> None:
    """A lagging read caches its answer under the lagging version, never under the new one."""
    c = observed["cache"]
    n_before, n_after = c["n_before"], c["n_after"]
    assert n_after > n_before
    assert c["lagging"]["rows"] == n_before and c["lagging"]["cache"] == "miss"
    # Had the version come from the primary while the points came from the standby, this
    # read (same path and query, new version) would be a hit with the old rows.
    assert c["after_replay"]["rows"] == n_after and c["after_replay"]["cache"] == "miss"
    assert c["again"]["cache"] == "hit" and c["again"]["rows"] == n_after


def test_reads_go_to_the_primary_while_the_standby_is_down(observed: dict[str, Any]) -> None:
    """pg_ctlcluster stops the standby under a process that keeps a connection to it:
    reads are answered by the primary (no error), then by the standby once it is back."""
    d = observed["down"]
    assert d["before"]["status"] == 200 and _data_sql(d["before"]["standby"])
    for name in ("kept_connection_dead", "within_retry", "after_retry_still_down"):
        s = d[name]
        assert s["status"] == 200 and s["rows"] == d["n"], (name, s)
        assert _data_sql(s["primary"]), f"{name}: the primary ran no data query"
    assert d["router"] == {"get_request": "default", "read_connection": "default"}
    back = d["back"]
    assert back["status"] == 200 and back["rows"] == d["n"]
    assert _data_sql(back["standby"]) and not _data_sql(back["primary"])


# ---------------------------------------------------------------- the child


def _rows_csv(t0: float, n: int, value: float) -> bytes:
    lines = ["time,value,error"] + [
        f"{t0 + i * 0.1:.4f},{value + i * 0.01:.3f},0.05" for i in range(n)
    ]
    return ("\n".join(lines) + "\n").encode()


def _scenario() -> dict[str, Any]:  # noqa: PLR0915 (one linear story)
    import io

    import django

    t_start = time.perf_counter()
    django.setup()
    from django.conf import settings
    from django.contrib.auth.models import Group, User
    from django.core.cache import cache
    from django.core.management import call_command
    from django.db import OperationalError, connections, router, transaction
    from django.http import HttpResponse
    from django.test import RequestFactory
    from django.test.utils import CaptureQueriesContext, override_settings, setup_test_environment
    from rest_framework.authtoken.models import Token
    from rest_framework.test import APIClient

    from lcstore.dbrouter import ReplicaRoutingMiddleware, read_connection, sticky_key
    from lcstore.models import Band, FluxPoint, Instrument, Source, Upload

    setup_test_environment()
    facts: dict[str, Any] = {"timeline": []}

    def mark(what: str) -> None:
        facts["timeline"].append((what, round(time.perf_counter() - t_start, 2)))

    primary, standby = connections["default"], connections["replica"]
    replica_settings = settings.DATABASES["replica"]
    facts["wiring"] = {
        "routers": list(settings.DATABASE_ROUTERS),
        "middleware_last": settings.MIDDLEWARE[-1],
        "replica_test": {k: v for k, v in replica_settings["TEST"].items() if k == "MIRROR"},
        "replica_options": replica_settings["OPTIONS"].get("options", ""),
    }

    def one(conn: Any, sql: str, params: list[Any] | None = None) -> Any:
        with conn.cursor() as cur:
            cur.execute(sql, params or [])
            return cur.fetchone()[0]

    def catch_up() -> None:
        lsn = one(primary, "SELECT pg_current_wal_lsn()::text")
        deadline = time.monotonic() + 20
        while not one(standby, "SELECT pg_last_wal_replay_lsn() >= %s::pg_lsn", [lsn]):
            if time.monotonic() > deadline:
                raise RuntimeError("the standby did not catch up within 20 s")
            time.sleep(0.02)

    mark("django ready")
    call_command("migrate", verbosity=0)
    mark("migrated")

    def wait_for_standby() -> None:
        deadline = time.monotonic() + 60
        while True:  # the standby may still be starting ("the database system is starting up")
            try:
                standby.ensure_connection()
                return
            except OperationalError:
                if time.monotonic() > deadline:
                    raise
                time.sleep(0.1)

    wait_for_standby()
    mark("standby accepts connections")
    facts["in_recovery"] = {
        "default": one(primary, "SELECT pg_is_in_recovery()"),
        "replica": one(standby, "SELECT pg_is_in_recovery()"),
    }

    # An invented catalogue (names as in tests/conftest.py), written outside any request.
    Source.objects.create(slug="tarn-7", name="Tarn 7", ra=150.0, dec=20.0)
    Instrument.objects.create(
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
    # Cousins R zero point: Bessell, Castelli & Plez 1998, Table A2 (as in tests/conftest.py).
    Band.objects.create(
        slug="r", name="Cousins R", kind="flux_density", wavelength_eff=6410.0,
        mag_system="Vega", zero_point_jy=3064.0,
    )  # fmt: skip
    uploader = User.objects.create_user(username="ada")
    uploader.groups.add(Group.objects.get(name="contributors"))
    other = User.objects.create_user(username="dov")

    def client(user: Any | None) -> APIClient:
        c = APIClient()
        if user is not None:
            c.credentials(HTTP_AUTHORIZATION=f"Token {Token.objects.create(user=user).key}")
        return c

    ada, dov, anon = client(uploader), client(other), client(None)
    fields = dict(
        source="tarn-7", band="r", instrument="fern-0p6", value_unit="mJy",
        time_format="mjd", time_scale="tdb", time_reference="BARYCENTER",
    )  # fmt: skip

    def upload(content: bytes, name: str) -> Any:
        f = io.BytesIO(content)
        f.name = name
        return ada.post("/api/v1/uploads/", {"file": f, **fields}, format="multipart")

    def step(c: APIClient, path: str, call: Any = None) -> dict[str, Any]:
        with CaptureQueriesContext(primary) as on_p, CaptureQueriesContext(standby) as on_s:
            r = call() if call else c.get(path)
        out = {
            "status": r.status_code,
            "primary": [q["sql"] for q in on_p.captured_queries],
            "standby": [q["sql"] for q in on_s.captured_queries],
            "cache": r.get("X-Lcstore-Cache"),
        }
        if call is None and r.status_code == 200:
            out["rows"] = len(r.json()["rows"])
        return out

    curve = "/api/v1/sources/tarn-7/lightcurve/"
    n0, n1, n2 = 3, 2, 4
    facts.update(n0=n0, n1=n1, n_extra=1)
    first = upload(_rows_csv(60000.0, n0, 1.0), "first.csv")
    assert first.status_code == 201, first.content
    catch_up()
    mark("first upload replicated")
    facts["standby_tables"] = one(
        standby, "SELECT count(*) FROM pg_tables WHERE tablename LIKE 'lcstore_%%'"
    )
    steps: dict[str, Any] = {}
    facts["steps"] = steps
    with override_settings(LCSTORE_CACHE_ANSWERS=False):  # every answer computed afresh
        steps["anonymous_before"] = step(anon, curve)
        one(standby, "SELECT pg_wal_replay_pause()")
        facts["replay_paused"] = one(standby, "SELECT pg_get_wal_replay_pause_state()")
        # The extra point (see the module docstring), on the primary only until replay resumes.
        extra = FluxPoint.objects.filter(upload_id=first.json()["id"]).order_by("t").first()
        extra.pk, extra.t = None, extra.t + 0.05
        extra.save()
        steps["upload"] = step(ada, "", lambda: upload(_rows_csv(60010.0, n1, 2.0), "second.csv"))
        wrote_at = time.monotonic()
        until = cache.get(sticky_key(uploader.pk))
        facts["mark_set"] = until is not None and until > time.time()
        steps["uploader_right_after"] = step(ada, curve)
        steps["other_user_lagging"] = step(dov, curve)
        steps["anonymous_lagging"] = step(anon, curve)
        time.sleep(max(0.0, wrote_at + STICKY_SECONDS + 0.1 - time.monotonic()))
        steps["uploader_after_window"] = step(ada, curve)
        steps["uploader_after_window"]["after_write_s"] = time.monotonic() - wrote_at
        one(standby, "SELECT pg_wal_replay_resume()")
        catch_up()
        steps["anonymous_after_replay"] = step(anon, curve)

    mark("uncached steps")
    # The router's rules, seen from inside requests (RequestFactory + the middleware).
    seen: dict[str, Any] = {}

    def probe(request: Any) -> HttpResponse:
        prefix = request.method.lower() + "_request"
        seen[prefix] = router.db_for_read(Upload)
        seen[prefix + "_read_connection"] = read_connection().alias
        seen["accounts_in_" + prefix] = router.db_for_read(User)
        with transaction.atomic():
            seen[prefix + "_in_atomic"] = router.db_for_read(Upload)
            seen[prefix + "_in_atomic_read_connection"] = read_connection().alias
        return HttpResponse()

    ReplicaRoutingMiddleware(probe)(RequestFactory().get("/"))
    ReplicaRoutingMiddleware(probe)(RequestFactory().post("/"))
    seen["outside_request"] = router.db_for_read(Upload)
    facts["router"] = seen

    # Cached answers (on, as in production) while the standby lags behind an upload.
    with override_settings(LCSTORE_CACHE_ANSWERS=True):
        cache.clear()
        query = curve + "?bands=r"
        one(standby, "SELECT pg_wal_replay_pause()")
        third = upload(_rows_csv(60020.0, n2, 3.0), "third.csv")
        assert third.status_code == 201, third.content
        c: dict[str, Any] = {"n_before": n0 + 1 + n1, "n_after": n0 + 1 + n1 + n2}
        c["lagging"] = step(dov, query)
        one(standby, "SELECT pg_wal_replay_resume()")
        catch_up()
        c["after_replay"] = step(anon, query)
        c["again"] = step(dov, query)
        facts["cache"] = c
    mark("cached steps")

    # The standby stops and comes back (dbrouter rule 6). This process keeps a connection
    # to it from the steps above; after the stop that connection is dead.
    cluster = os.environ["LCREPL_STANDBY_CLUSTER"].split()
    ctl = ["pg_ctlcluster", "--skip-systemctl-redirect", *cluster]

    def step_on_primary(c: APIClient) -> dict[str, Any]:
        """A step while the standby is down (capturing on it would connect to it)."""
        with CaptureQueriesContext(primary) as on_p:
            t0 = time.perf_counter()
            r = c.get(curve)
            seconds = time.perf_counter() - t0
        return {
            "status": r.status_code,
            "rows": len(r.json()["rows"]) if r.status_code == 200 else None,
            "primary": [q["sql"] for q in on_p.captured_queries],
            "seconds": seconds,
        }

    down: dict[str, Any] = {"n": n0 + 1 + n1 + n2}
    facts["down"] = down
    with override_settings(LCSTORE_CACHE_ANSWERS=False):
        down["before"] = step(anon, curve)
        _run([*ctl, "stop", "-m", "fast"])
        mark("standby stopped")
        down["kept_connection_dead"] = step_on_primary(anon)
        down["within_retry"] = step_on_primary(dov)
        seen_down: dict[str, Any] = {}

        def probe_down(request: Any) -> HttpResponse:
            seen_down["get_request"] = router.db_for_read(Upload)
            seen_down["read_connection"] = read_connection().alias
            return HttpResponse()

        ReplicaRoutingMiddleware(probe_down)(RequestFactory().get("/"))
        down["router"] = seen_down
        time.sleep(RETRY_SECONDS + 0.1)
        down["after_retry_still_down"] = step_on_primary(anon)
        _run([*ctl, "start"])
        wait_for_standby()
        mark("standby back")
        time.sleep(RETRY_SECONDS + 0.1)
        down["back"] = step(anon, curve)
    for conn in connections.all():
        conn.close()
    return facts


if __name__ == "__main__":
    print(json.dumps(_scenario(), default=str))
