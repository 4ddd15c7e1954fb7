"""``manage.py lcbench``: measure lcstore against PostgreSQL itself, on a fresh database.

Every figure is a ratio against the physical limit measured in the same run on
the same machine (absolute times on shared machines are noise):

- ingest: a CSV uploaded over HTTP to a live gunicorn vs binary COPY of the
  same rows into a bare table with the point table's columns and indexes;
- binned: ``bin=1d`` CSV over HTTP vs one SQL GROUP BY of the weighted mean;
- raw: the points as CSV over HTTP vs ``COPY (SELECT …) TO STDOUT``;
- isolation: a source's binned pull with 100× more points of other sources
  in the table vs with that source alone;
- lags: DCF and ZDCF timings, and ZDCF vs the pyzdcf oracle (its own venv);
- growth: ingest and binned pull at 1e4 … 1e7 points;
- load: gunicorn (workers = cores) under a fixed-duration loopback load, uncached,
  cached in local memory, and cached in Redis (a second server with REDIS_URL);
- partition (only with --only): the binned SQL on a hash-partitioned copy (by
  source, 8 partitions) of the bare table vs the bare table, same rows.

The database ``lcbench_<pid>`` is created through Django's test-database
machinery on the server of DATABASE_URL and dropped at the end; servers run
on free loopback ports and are stopped whatever happens. Not part of the
test suite.
"""

from __future__ import annotations

import cProfile
import datetime as dt
import io
import os
import pstats
import re
import secrets
import signal
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from urllib.parse import quote

import httpx
import numpy as np
import pandas as pd
import psycopg
import redis
from django.conf import settings
from django.core.management.base import BaseCommand, CommandError, CommandParser
from django.db import connection

from lcstore import bench
from lcstore.bench import Row, Timing, best_of, seconds_text
from lcstore.ingest.load import POINT_COLUMNS

BASE_DIR = Path(__file__).resolve().parents[3]
DEFAULT_SERVER = "postgres://postgres@127.0.0.1:5432/postgres"
PHASES = ("ingest", "binned", "raw", "load", "growth", "isolation", "lags", "partition")
# The partition comparison is a layout study, not a goal of the service: run when asked.
DEFAULT_PHASES = tuple(p for p in PHASES if p != "partition")
DEFAULT_REDIS_URL = "redis://127.0.0.1:6379/13"
GROWTH_SIZES = (10_000, 100_000, 1_000_000, 10_000_000)
BARE_TABLE = "lcbench_bare"
PART_TABLE = "lcbench_part"
N_PARTITIONS = 8
# The ingest repeat (0-based) that also times the point-table COPY and the BJD_TDB upload:
# not the first, which holds the run's first big COPY and upload (in one --only ingest run the
# first bare COPY took 3.29 s, the later ones 2.47-2.56 s).
PROBE_REPEAT = 1
MAIN, LOAD, ISO = "bench-main", "bench-load", "bench-iso"
N_OTHER_SOURCES = 100
ISO_SLICES = 10
BINNED_SQL = """
SELECT floor(t / 1.0) AS bin,
       sum(value * w) / sum(w) AS value,
       1.0 / sqrt(sum(w)) AS error,
       count(*) AS n
FROM (SELECT t, value, 1.0 / (error * error) AS w
      FROM {table}
      WHERE source_id = %s AND band_id = %s AND NOT upper_limit) AS p
GROUP BY 1
ORDER BY 1
"""
RAW_COPY_SQL = """
COPY (SELECT b.slug AS band, p.t AS time, p.value, p.error, p.upper_limit,
             i.slug AS instrument, p.upload_id AS upload
      FROM {table} AS p
      JOIN {band} AS b ON b.id = p.band_id
      JOIN {instrument} AS i ON i.id = p.instrument_id
      WHERE p.source_id = {source_id} AND p.band_id = {band_id}
      ORDER BY p.t) TO STDOUT (FORMAT csv, HEADER)
"""


def _count(text: str) -> int:
    return int(float(text))


@dataclass
class Config:
    phases: tuple[str, ...]
    main_n: int
    growth_sizes: tuple[int, ...]
    growth_skipped: tuple[int, ...]
    repeats: int
    pull_repeats: int
    iso_n: int
    load_n: int
    load_seconds: int
    load_connections: int
    lag_n: int
    oracle_n: int
    frame: str
    profile: bool
    workers: int
    redis_url: str


class Bench:
    """One benchmark run: its database, server, connections, and the rows it measured."""

    def __init__(self, cfg: Config, progress: Callable[[str], None]):
        self.cfg = cfg
        self.say = progress
        self.rows: list[Row] = []
        self.notes: list[str] = []
        self.profiles: list[str] = []
        self.server: bench.Server | None = None
        self.client: httpx.Client | None = None
        self.pg: psycopg.Connection[Any] | None = None
        self.db_name: str | None = None
        self.old_name: str | None = None
        self.db_url = ""
        self.state: dict[str, int] = {}
        self.vacuumed = False
        self.warmed = False  # the current gunicorn's workers have served an upload
        self.ingest_cache: dict[int, tuple[Timing, Timing, Timing | None]] = {}
        self.binned_cache: dict[int, tuple[Timing, Timing, Timing | None]] = {}
        self.csv_cache: dict[int, tuple[dict[str, np.ndarray], bytes]] = {}
        self.superuser = False
        self.bust = 0
        self.cache_present = _curve_cache_present()
        self.facts: list[tuple[str, str]] = []
        self.ingest_bary: Timing | None = None
        # The Server-Timing stages of the timed uploads of ingest_at, by row count, in run order.
        self.ingest_stages: dict[int, list[dict[str, float]]] = {}
        self.last_stages: dict[str, float] = {}
        self.extra_server: bench.Server | None = None
        self.redis: redis.Redis | None = None  # the dedicated db, flushed at the end
        self.load_runs = 0

    # ------------------------------------------------------------------ lifecycle

    def open(self) -> None:
        name = f"lcbench_{os.getpid()}"
        sd = connection.settings_dict
        sd.setdefault("TEST", {})["NAME"] = name
        self.old_name = sd["NAME"]
        host = sd.get("HOST") or "127.0.0.1"
        port = str(sd.get("PORT") or 5432)
        user = sd.get("USER") or ""
        password = sd.get("PASSWORD") or ""
        auth = quote(user, safe="") + (":" + quote(password, safe="") if password else "")
        self.db_url = f"postgres://{auth}{'@' if auth else ''}{host}:{port}/{name}"
        self.say(f"creating and migrating database {name} on {host}:{port}")
        self.db_name = name
        connection.creation.create_test_db(verbosity=0, autoclobber=True, serialize=False)
        self.pg = psycopg.connect(self.db_url, autocommit=True)
        row = self.pg.execute(
            "SELECT rolsuper FROM pg_roles WHERE rolname = current_user"
        ).fetchone()
        self.superuser = bool(row and row[0])
        pg_settings = {
            k: str(v)
            for k, v in self.pg.execute(
                "SELECT name, setting || COALESCE(unit, '') FROM pg_settings WHERE name = ANY(%s)",
                [["shared_buffers", "work_mem", "max_wal_size", "synchronous_commit"]],
            ).fetchall()
        }
        pg_settings["server_version"] = self.pg.execute("SHOW server_version").fetchone()[0]
        for key in ("shared_buffers",):
            if key in pg_settings:
                pg_settings[key] = self.pg.execute(f"SHOW {key}").fetchone()[0]
        self.facts = bench.machine_facts(pg_settings)
        self._catalogue()
        self._bare_table()

    def close(self) -> None:
        if self.client is not None:
            self.client.close()
            self.client = None
        if self.server is not None:
            self.server.stop()
            self.server = None
        if self.extra_server is not None:
            self.extra_server.stop()
            self.extra_server = None
        self._release_redis()
        if self.pg is not None:
            self.pg.close()
            self.pg = None
        if self.db_name is None:
            return
        self.say(f"dropping database {self.db_name}")
        try:
            connection.creation.destroy_test_db(self.old_name, verbosity=0)
        except Exception as exc:  # noqa: BLE001 - fall back to a forced drop below
            self.say(f"destroy_test_db failed ({exc}); dropping WITH (FORCE)")
        connection.settings_dict["NAME"] = self.old_name
        settings.DATABASES["default"]["NAME"] = self.old_name
        admin_url = self.db_url.rsplit("/", 1)[0] + "/" + (self.old_name or "postgres")
        try:
            with psycopg.connect(admin_url, autocommit=True) as admin:
                admin.execute(f'DROP DATABASE IF EXISTS "{self.db_name}" WITH (FORCE)')
                left = admin.execute(
                    "SELECT 1 FROM pg_database WHERE datname = %s", [self.db_name]
                ).fetchone()
            if left:
                self.say(f"WARNING: database {self.db_name} is still there")
        except psycopg.Error as exc:
            self.say(f"WARNING: could not check/drop {self.db_name}: {exc}")
        self.db_name = None

    def _catalogue(self) -> None:
        from django.contrib.auth.models import Group, User
        from rest_framework.authtoken.models import Token

        from lcstore.models import Band, Instrument, Source

        user = User.objects.create_user(username="lcbench")
        user.groups.add(Group.objects.get(name="contributors"))
        self.user = user
        self.token = Token.objects.create(user=user).key
        self.instrument = Instrument.objects.create(
            slug="bench-1m",
            name="Bench 1.0 m",
            kind="ground",
            site_lon=-70.7,
            site_lat=-30.2,
            site_height=2200.0,
            default_time_format="mjd",
            default_time_scale="utc",
            default_time_reference="TOPOCENTER",
        )
        self.band = Band.objects.create(
            slug="bench-r",
            name="Bench r",
            kind="flux_density",
            wavelength_eff=6200.0,
            mag_system="AB",
        )
        self.sources = {}
        for i, slug in enumerate((MAIN, LOAD, ISO)):
            self.sources[slug] = Source.objects.create(
                slug=slug, name=slug, ra=150.0 + i, dec=20.0, ebv=0.0
            )
        others = Source.objects.bulk_create(
            [
                Source(slug=f"bench-other-{k:03d}", name=f"other {k}", ra=k * 3.5, dec=-10.0)
                for k in range(N_OTHER_SOURCES)
            ]
        )
        self.other_ids = [s.pk for s in others]

    def _bare_table(self) -> None:
        from lcstore.models import FluxPoint

        assert self.pg is not None
        table = FluxPoint._meta.db_table
        self.pg.execute(f"CREATE TABLE {BARE_TABLE} (LIKE {table} INCLUDING ALL)")

        def defs(t: str) -> list[str]:
            rows = self.pg.execute(  # type: ignore[union-attr]
                "SELECT indexdef FROM pg_indexes WHERE tablename = %s ORDER BY indexdef", [t]
            ).fetchall()
            return sorted(re.sub(r"INDEX \S+ ON \S+", "INDEX ON <t>", r[0]) for r in rows)

        mine, theirs = defs(table), defs(BARE_TABLE)
        n_fk = self.pg.execute(
            "SELECT count(*) FROM pg_constraint WHERE conrelid = %s::regclass AND contype = 'f'",
            [table],
        ).fetchone()[0]
        same = "the same" if mine == theirs else "DIFFERENT"
        self.notes.append(
            f"Bare table {BARE_TABLE} = CREATE TABLE … (LIKE {table} INCLUDING ALL): "
            f"index definitions {same} as the point table's: "
            + "; ".join(d.replace("INDEX ON <t> USING btree ", "") for d in mine)
            + f". The point table also has {n_fk} foreign keys (not copied by LIKE)."
        )

    def server_env(self) -> dict[str, str]:
        """The environment of a bench gunicorn: the bench database, throttles off."""
        env = {
            k: v
            for k, v in os.environ.items()
            if not k.startswith(("DATABASE_", "DJANGO_", "LCSTORE_")) and k != "REDIS_URL"
        }
        if os.environ.get("REDIS_URL"):
            env["REDIS_URL"] = os.environ["REDIS_URL"]
        env.update(
            {
                "DATABASE_URL": self.db_url,
                "DJANGO_SETTINGS_MODULE": "lcstore.settings",
                "DEBUG": "0",
                "ALLOWED_HOSTS": "127.0.0.1,localhost",
                "LCSTORE_MAX_UPLOAD_MB": "8192",
                "LCSTORE_THROTTLE_UPLOADS": "off",
                "LCSTORE_THROTTLE_HEAVY": "off",
                "LCSTORE_THROTTLE_READ": "off",
                "SECRET_KEY": secrets.token_urlsafe(50),
                "PYTHONUNBUFFERED": "1",
            }
        )
        return env

    def start_server(self, env: dict[str, str]) -> tuple[bench.Server, httpx.Client]:
        server = bench.Server(base_dir=BASE_DIR, env=env, workers=self.cfg.workers)
        server.start()
        self.warmed = False
        client = httpx.Client(
            base_url=server.url,
            headers={"Authorization": f"Token {self.token}"},
            timeout=httpx.Timeout(3600.0),
            trust_env=False,
        )
        try:
            for _ in range(2 * self.cfg.workers):  # every worker imports its views once
                client.get("/api/v1/sources/?limit=1")
                client.get(f"/api/v1/sources/{MAIN}/lightcurve/?bands=none-such")
        except BaseException:
            client.close()
            server.stop()
            raise
        return server, client

    def ensure_server(self) -> httpx.Client:
        if self.client is not None:
            return self.client
        self.say(f"starting gunicorn ({self.cfg.workers} workers) on a loopback port")
        self.server, self.client = self.start_server(self.server_env())
        return self.client

    # ------------------------------------------------------------------ database helpers

    def _tables(self) -> dict[str, str]:
        from lcstore.models import Band, FluxPoint, Instrument, StoredFile, Upload

        return {
            "point": FluxPoint._meta.db_table,
            "upload": Upload._meta.db_table,
            "upload_sources": Upload.sources.through._meta.db_table,
            "file": StoredFile._meta.db_table,
            "band": Band._meta.db_table,
            "instrument": Instrument._meta.db_table,
        }

    def reset_points(self) -> None:
        """Empty the point table and the uploads (a benchmark-only shortcut: lcstore deletes nothing)."""
        t = self._tables()
        assert self.pg is not None
        self.pg.execute(
            f"TRUNCATE {t['point']}, {t['upload_sources']}, {t['upload']}, {t['file']} CASCADE"
        )
        # Identities are not restarted: upload ids keep growing, so keys that contain
        # the newest upload id (answer caches) never repeat after a reset.
        self.state.clear()
        self.vacuumed = False

    def checkpoint(self) -> None:
        """Start each timed load with no pending checkpoint (same footing for both sides)."""
        if self.superuser and self.pg is not None:
            self.pg.execute("CHECKPOINT")

    def vacuum(self) -> None:
        if self.vacuumed:
            return
        assert self.pg is not None
        self.say("VACUUM (ANALYZE) of the point table")
        self.pg.execute(f"VACUUM (ANALYZE) {self._tables()['point']}")
        self.vacuumed = True

    def dummy_upload(self, source_id: int) -> int:
        from lcstore.models import StoredFile, Upload

        sf = StoredFile.objects.create(sha256=secrets.token_hex(32), size=0, content=b"")
        up = Upload.objects.create(
            uploader=self.user,
            file=sf,
            file_name="lcbench-copy",
            format="csv",
            source_id=source_id,
            band=self.band,
            instrument=self.instrument,
            time_format="mjd",
            time_scale="tdb",
            time_reference="BARYCENTER",
        )
        up.sources.set([source_id])
        return int(up.pk)

    def point_payload(
        self,
        *,
        source_id: np.ndarray | int,
        upload_id: np.ndarray | int,
        t: np.ndarray,
        value: np.ndarray,
        error: np.ndarray,
        chunk_rows: int = 100_000,
    ) -> Iterator[bytes]:
        """Binary COPY stream of point rows (same 12 columns as the service writes)."""
        n = len(t)
        yield bench.COPY_HEADER
        for a, b in bench.chunked(n, chunk_rows):
            m = b - a

            def col(x: np.ndarray | int, a: int = a, b: int = b, m: int = m) -> np.ndarray:
                return x[a:b] if isinstance(x, np.ndarray) else np.full(m, x, dtype=np.int64)

            yield bench.copy_chunk(
                [
                    ("int8", col(source_id)),
                    ("int8", col(int(self.band.pk))),
                    ("int8", col(int(self.instrument.pk))),
                    ("int8", col(upload_id)),
                    ("float8", t[a:b]),
                    ("float8", value[a:b]),
                    ("float8", error[a:b]),
                    ("bool", np.zeros(m, dtype=bool)),
                    ("float8", None),
                    ("float8", t[a:b]),
                    ("float8", value[a:b]),
                    ("float8", error[a:b]),
                ]
            )
        yield bench.COPY_TRAILER

    def copy_in(self, table: str, payload: Any, *, replica: bool = False) -> float:
        """COPY a binary payload in one transaction; wall seconds including the commit."""
        assert self.pg is not None
        sql = f"COPY {table} ({', '.join(POINT_COLUMNS)}) FROM STDIN (FORMAT BINARY)"
        t0 = time.perf_counter()
        with self.pg.transaction():
            if replica:
                self.pg.execute("SET LOCAL session_replication_role = replica")
            with self.pg.cursor() as cur, cur.copy(sql) as cp:
                for chunk in payload:
                    cp.write(chunk)
        return time.perf_counter() - t0

    # ------------------------------------------------------------------ data and HTTP

    def curve(self, n: int) -> tuple[dict[str, np.ndarray], bytes]:
        if n not in self.csv_cache:
            self.say(f"generating a {n:,}-row CSV")
            arrays = bench.curve_arrays(n, seed=n % 1_000_003)
            self.csv_cache = {n: (arrays, bench.curve_csv(arrays))}  # keep one in memory
        return self.csv_cache[n]

    def upload_fields(self, slug: str, frame: str) -> dict[str, str]:
        scale, reference = (
            ("utc", "TOPOCENTER") if frame == "topocentric" else ("tdb", "BARYCENTER")
        )
        return {
            "source": slug,
            "band": self.band.slug,
            "instrument": self.instrument.slug,
            "value_unit": "mJy",
            "time_format": "mjd",
            "time_scale": scale,
            "time_reference": reference,
            "reduction": "lcbench synthetic curve",
        }

    def upload(self, slug: str, data: bytes, n: int, *, frame: str | None = None) -> float:
        client = self.ensure_server()
        fields = self.upload_fields(slug, frame or self.cfg.frame)
        elapsed, body, self.last_stages = bench.timed_upload(client, data, fields)
        stages = bench.stages_text(self.last_stages)
        self.say(f"upload of {n:,} rows: {elapsed:.2f} s ({frame or self.cfg.frame}; ms: {stages})")
        stored = body.get("n_points", (body.get("counts") or {}).get("points"))
        if stored != n:
            raise CommandError(f"upload stored {stored} points, expected {n}: {str(body)[:500]}")
        self.vacuumed = False
        return elapsed

    def warm_uploads(self) -> None:
        """Two small uploads per worker first, so no timed upload is the first of its kind.

        Which worker takes which is the kernel's choice; the imports of a worker's first
        request are done when it starts (lcstore/wsgi.py), not here.
        """
        if self.warmed:
            return
        arrays = bench.curve_arrays(1000, seed=3)
        for k in range(2 * self.cfg.workers):
            shifted = {**arrays, "time": arrays["time"] + k}  # distinct bytes each time
            self.upload(MAIN, bench.curve_csv(shifted), 1000)
        self.reset_points()
        self.warmed = True

    def ensure(self, slug: str, n: int) -> None:
        """The source holds exactly ``n`` points of the synthetic curve (uploaded over HTTP)."""
        if self.state.get(slug) == n:
            return
        if slug in self.state:
            self.reset_points()
        _, data = self.curve(n)
        self.say(f"loading {n:,} points of {slug} over HTTP (untimed, times in BJD_TDB)")
        self.upload(slug, data, n, frame="barycentric")
        self.state[slug] = n

    def lightcurve_path(self, slug: str, *, binned: bool, bust: bool) -> str:
        path = f"/api/v1/sources/{slug}/lightcurve/?bands={self.band.slug}&format=csv"
        if binned:
            path += "&bin=1d"
        if bust:
            self.bust += 1
            path += f"&start=-{self.bust}"
        return path

    def pull(self, slug: str, *, binned: bool) -> bytes:
        client = self.ensure_server()
        path = self.lightcurve_path(slug, binned=binned, bust=self.cache_present)
        return bench.timed_get(client, path)[1]

    def sql_binned(self, slug: str) -> list[tuple[Any, ...]]:
        assert self.pg is not None
        sql = BINNED_SQL.format(table=self._tables()["point"])
        return self.pg.execute(sql, [self.sources[slug].pk, self.band.pk]).fetchall()

    def sql_raw(self, slug: str) -> int:
        assert self.pg is not None
        t = self._tables()
        sql = RAW_COPY_SQL.format(
            table=t["point"],
            band=t["band"],
            instrument=t["instrument"],
            source_id=int(self.sources[slug].pk),
            band_id=int(self.band.pk),
        )
        size = 0
        with self.pg.cursor() as cur, cur.copy(sql) as cp:
            for block in cp:
                size += len(block)
        return size

    def alternate(
        self, a: Callable[[], Any], b: Callable[[], Any], repeats: int
    ) -> tuple[Timing, Timing]:
        """Time a and b in turn (one warm-up each), so drifts of the machine hit both."""
        a()
        b()
        ta, tb = [], []
        for _ in range(repeats):
            ta.append(best_of(a, 1).best)
            tb.append(best_of(b, 1).best)
        return Timing(min(ta), tuple(ta)), Timing(min(tb), tuple(tb))

    # ------------------------------------------------------------------ measurements

    def ingest_at(self, n: int, repeats: int, *, decompose: bool, budget_s: float = 150.0) -> None:
        """Upload ``n`` rows over HTTP and COPY them into the bare table, alternately.

        Repeats stop early once the timed uploads and COPYs have taken ``budget_s``
        (long figures get fewer runs; short ones always get ``repeats``). With ``decompose``,
        repeat ``PROBE_REPEAT`` also times a COPY into the point table itself (its real indexes
        and statistics) and the same upload with times already in BJD_TDB (no light-time step),
        which phase_ingest sets against the bare COPY of that repeat.
        """
        if n in self.ingest_cache:
            return
        from lcstore.models import FluxPoint

        arrays, data = self.curve(n)
        table = FluxPoint._meta.db_table
        main_id = int(self.sources[MAIN].pk)
        self.warm_uploads()
        prod: list[float] = []
        stages: list[dict[str, float]] = []
        bare: list[float] = []
        fk: list[float] = []
        bary: list[float] = []
        probe = min(PROBE_REPEAT, repeats - 1)
        for r in range(repeats):
            if r > 0 and sum(prod) + sum(bare) > budget_s:
                break
            self.say(f"ingest {n:,} rows: repeat {r + 1} (up to {repeats})")
            self.reset_points()
            assert self.pg is not None
            upload_id = 1
            if decompose and r == probe:
                upload_id = self.dummy_upload(main_id)
            payload = list(
                self.point_payload(
                    source_id=main_id,
                    upload_id=upload_id,
                    t=arrays["time"],
                    value=arrays["value"],
                    error=arrays["error"],
                )
            )
            if decompose and r == probe:
                self.checkpoint()
                fk.append(self.copy_in(table, payload))
                self.reset_points()
                if self.cfg.frame != "barycentric":
                    self.checkpoint()
                    bary.append(self.upload(MAIN, data, n, frame="barycentric"))
                    self.reset_points()
            self.pg.execute(f"TRUNCATE {BARE_TABLE}")
            self.checkpoint()
            bare.append(self.copy_in(BARE_TABLE, payload))
            self.say(f"COPY of {n:,} rows into the bare table: {bare[-1]:.2f} s")
            del payload
            self.checkpoint()
            prod.append(self.upload(MAIN, data, n))
            stages.append(self.last_stages)
            self.state = {MAIN: n}
        assert self.pg is not None
        self.pg.execute(f"TRUNCATE {BARE_TABLE}")
        self.ingest_cache[n] = (
            Timing(min(prod), tuple(prod)),
            Timing(min(bare), tuple(bare)),
            Timing(min(fk), tuple(fk)) if fk else None,
        )
        self.ingest_bary = Timing(min(bary), tuple(bary)) if bary else None
        self.ingest_stages[n] = stages

    def binned_at(self, n: int, repeats: int) -> None:
        if n in self.binned_cache:
            return
        self.ensure(MAIN, n)
        before = None
        if not self.vacuumed:
            self.say(f"binned pull of {n:,} points before VACUUM")
            before = best_of(lambda: self.pull(MAIN, binned=True), 3, warmup=1)
        self.vacuum()
        self.say(f"binned pull of {n:,} points: {repeats} repeats each side")
        prod, ref = self.alternate(
            lambda: self.pull(MAIN, binned=True), lambda: self.sql_binned(MAIN), repeats
        )
        self._check_binned(n, self.pull(MAIN, binned=True), self.sql_binned(MAIN))
        self.binned_cache[n] = (prod, ref, before)
        if n == self.cfg.main_n:
            self.cache_probe(MAIN)

    def cache_probe(self, slug: str) -> None:
        """Repeat one binned URL and report the response headers that speak of a cache."""
        client = self.ensure_server()
        path = self.lightcurve_path(slug, binned=True, bust=True)
        seen: dict[str, int] = {}
        times = []
        for _ in range(2 * self.cfg.workers + 2):
            t0 = time.perf_counter()
            r = client.get(path)
            times.append(time.perf_counter() - t0)
            for k, v in r.headers.items():
                if "cache" in k.lower():
                    seen[f"{k}: {v}"] = seen.get(f"{k}: {v}", 0) + 1
        found = ", ".join(f"{k} x{c}" for k, c in sorted(seen.items())) or "no cache header"
        self.notes.append(
            f"Cache probe: the same binned URL {len(times)} times in a row: {found}; "
            f"fastest {seconds_text(min(times))}, slowest {seconds_text(max(times))} "
            "(a local-memory cache is per gunicorn worker)."
        )

    def _check_binned(self, n: int, body: bytes, rows: list[tuple[Any, ...]]) -> None:
        got = pd.read_csv(io.BytesIO(body))
        ref = np.array([[float(x) for x in r] for r in rows]) if rows else np.zeros((0, 4))
        problems = []
        if len(got) != len(ref):
            problems.append(f"{len(got)} bins over HTTP, {len(ref)} from SQL")
        else:
            if not np.array_equal(got["n"].to_numpy(), ref[:, 3].astype(int)):
                problems.append("bin counts differ")
            dv = np.max(np.abs(got["value"].to_numpy() - ref[:, 1]) / np.abs(ref[:, 1]))
            de = np.max(np.abs(got["error"].to_numpy() - ref[:, 2]) / np.abs(ref[:, 2]))
            if not (dv < 1e-9 and de < 1e-9):
                problems.append(f"max relative differences value {dv:.1e}, error {de:.1e}")
        verdict = "; ".join(problems) if problems else "equal (rtol 1e-9)"
        self.notes.append(
            f"Binned check at {n:,} points: {len(got):,} bins; HTTP answer vs SQL GROUP BY: "
            f"{verdict}."
        )

    # ------------------------------------------------------------------ phases

    def phase_ingest(self) -> None:
        n = self.cfg.main_n
        # COPY times scatter by +-15 % between runs on these machines, against a 20 % goal.
        self.ingest_at(n, max(self.cfg.repeats, 7), decompose=True)
        prod, bare, fk = self.ingest_cache[n]
        paired = float(np.median(np.array(prod.runs) / np.array(bare.runs)))
        runs = (
            f"best of {prod.n}; {n / prod.best:,.0f} rows/s vs {n / bare.best:,.0f}; "
            f"median of the {prod.n} paired ratios {paired:.2f}x"
        )
        self.rows.append(
            Row(
                "ingest: CSV upload over HTTP vs COPY into bare table",
                f"{n:,}",
                seconds_text(prod.best),
                seconds_text(bare.best),
                prod.best / bare.best,
                1.2,
                notes=runs,
            )
        )
        stages = self.ingest_stages[n][prod.runs.index(prod.best)]
        if "copy" in stages:
            rest = bench.stages_text(stages, skip=("copy", "total"))
            self.rows.append(
                Row(
                    "  (info) the COPY stage of that upload vs the bare COPY",
                    f"{n:,}",
                    seconds_text(stages["copy"]),
                    seconds_text(bare.best),
                    stages["copy"] / bare.best,
                    notes=f"its Server-Timing, ms: {rest}",
                )
            )
        if fk is not None:
            # fk exists only if repeat `probe` ran, so that repeat's times are in the runs.
            probe = min(PROBE_REPEAT, bare.n - 1)
            probe_bare, probe_upload = bare.runs[probe], prod.runs[probe]
            self.rows.append(
                Row(
                    "  (info) COPY into the point table itself (no FK constraints; loader-checked)",
                    f"{n:,}",
                    seconds_text(fk.best),
                    seconds_text(probe_bare),
                    fk.best / probe_bare,
                    notes=f"one run, in repeat {probe + 1}, against that repeat's bare COPY; same payload",
                )
            )
            if self.ingest_bary is not None:
                self.rows.append(
                    Row(
                        "  (info) the same upload, times already BJD_TDB",
                        f"{n:,}",
                        seconds_text(self.ingest_bary.best),
                        seconds_text(probe_bare),
                        self.ingest_bary.best / probe_bare,
                        notes=(
                            f"one run, in repeat {probe + 1}, against that repeat's bare COPY; "
                            "time_scale=tdb, BARYCENTER; the UTC upload of that repeat: "
                            f"{seconds_text(probe_upload)}"
                        ),
                    )
                )
        frame = (
            "UTC MJD at a ground site (TOPOCENTER -> BJD_TDB)"
            if self.cfg.frame == "topocentric"
            else "TDB MJD at the barycentre (no light-time change)"
        )
        self.notes.append(
            f"Ingest: one source, one band, columns time,value,error in mJy; times are {frame}; "
            f"file {len(self.curve(n)[1]) / 1e6:.1f} MB. Both sides start from an empty table, "
            "after a CHECKPOINT; the upload time is the client's wall time to the 201 answer "
            "(multipart transfer, parse, convert, COPY, commit); the COPY time is the binary "
            "payload (built beforehand from the same rows, sorted by time) sent and committed."
        )

    def phase_binned(self) -> None:
        n = self.cfg.main_n
        self.binned_at(n, self.cfg.pull_repeats)
        prod, ref, before = self.binned_cache[n]
        self.rows.append(
            Row(
                "binned pull: bin=1d CSV over HTTP vs SQL GROUP BY",
                f"{n:,}",
                seconds_text(prod.best),
                seconds_text(ref.best),
                prod.best / ref.best,
                1.2,
                notes=f"best of {prod.n}; after VACUUM ANALYZE",
            )
        )
        if before is not None:
            self.rows.append(
                Row(
                    "  (info) the same pull right after the upload",
                    f"{n:,}",
                    seconds_text(before.best),
                    seconds_text(ref.best),
                    before.best / ref.best,
                    notes=f"best of {before.n} after 1 warm-up; before any VACUUM",
                )
            )

    def phase_raw(self) -> None:
        n = self.cfg.main_n
        self.ensure(MAIN, n)
        self.vacuum()
        repeats = max(self.cfg.repeats, self.cfg.pull_repeats)
        self.say(f"raw pull of {n:,} points: {repeats} repeats each side")
        sizes: dict[str, int] = {}

        def http() -> None:
            body = self.pull(MAIN, binned=False)
            sizes["http"] = len(body)
            sizes["lines"] = body.count(b"\n")

        def sql() -> None:
            sizes["sql"] = self.sql_raw(MAIN)

        prod, ref = self.alternate(http, sql, repeats)
        ok = "ok" if sizes["lines"] == n + 1 else f"MISMATCH ({sizes['lines']:,} lines)"
        self.rows.append(
            Row(
                "raw pull: CSV over HTTP vs COPY (SELECT ...) TO STDOUT",
                f"{n:,}",
                seconds_text(prod.best),
                seconds_text(ref.best),
                prod.best / ref.best,
                1.5,
                notes=f"best of {prod.n}; {sizes['http'] / 1e6:.0f} MB vs "
                f"{sizes['sql'] / 1e6:.0f} MB; rows {ok}",
            )
        )

    def phase_load(self) -> None:
        n = self.cfg.load_n
        self.ensure(LOAD, n)
        self.vacuum()
        assert self.server is not None
        backend = "redis" if os.environ.get("REDIS_URL") else "locmem"
        runs = [("uncached", True)]
        if self.cache_present:
            runs.append((f"cached, {backend}", False))
        for label, bust in runs:
            self.load_row(self.server.url, label, bust)
        if not self.cache_present:
            self.rows.append(Row("load (cached)", notes="no cache yet"))
        elif backend == "locmem":
            self.load_redis()
        self.notes.append(
            f"Load: one source of {n:,} points ({self.lightcurve_path(LOAD, binned=True, bust=False)}"
            f"); the load tool runs on the same {os.cpu_count()} cores as the server and "
            "PostgreSQL; each run follows an untimed 3 s warm-up."
            + (
                " Uncached requests carry a distinct start= each (no value repeats across runs)."
                if self.cache_present
                else ""
            )
        )

    def load_row(self, url: str, label: str, bust: bool, *, info: bool = False) -> None:
        """A warm-up and a timed fixed-duration load on the binned LOAD path; one report row."""
        n = self.cfg.load_n
        conns = self.cfg.load_connections
        threads = max(1, min(conns, os.cpu_count() or 1))
        path = self.lightcurve_path(LOAD, binned=True, bust=False)
        headers = {"Authorization": f"Token {self.token}"}

        def run(seconds: int) -> bench.LoadResult:
            self.load_runs += 1
            offset = self.load_runs * 100_000_000  # start= values never meet another run's
            try:
                return bench.wrk_load(
                    url,
                    path,
                    headers=headers,
                    seconds=seconds,
                    connections=conns,
                    threads=threads,
                    bust_cache=bust,
                    bust_offset=offset,
                )
            except FileNotFoundError:
                return bench.python_load(
                    url,
                    path,
                    headers=headers,
                    seconds=seconds,
                    connections=conns,
                    bust_cache=bust,
                    bust_offset=offset,
                )

        with httpx.Client(base_url=url, headers=headers, timeout=600.0, trust_env=False) as c:
            probe = c.get(path + ("&start=-1" if bust else ""))
        if probe.status_code != 200:  # a load of error answers would measure nothing
            raise CommandError(
                f"load {label}: GET {path} answered {probe.status_code}: {probe.text[:1000]}"
            )
        self.say(f"load {label}: warm-up (3 s, untimed)")
        run(3)
        self.say(f"load {label}: {self.cfg.load_seconds} s, {conns} connections")
        res = run(self.cfg.load_seconds)
        name = f"load ({label}): binned pulls, gunicorn x{self.cfg.workers}"
        self.rows.append(
            Row(
                ("  (info) " if info else "") + name,
                f"{n:,}",
                f"{res.rps:.1f} req/s",
                "",
                notes=f"p50 {seconds_text(res.p50_s)}, p99 {seconds_text(res.p99_s)}; "
                f"{res.requests} requests in {res.seconds:.0f} s, {conns} connections, "
                f"{res.errors} errors ({res.tool})",
            )
        )

    def _release_redis(self) -> None:
        if self.redis is None:
            return
        try:
            self.redis.flushdb()
        except redis.RedisError as exc:
            self.say(f"WARNING: could not flush {self.cfg.redis_url}: {exc}")
        self.redis.close()
        self.redis = None

    def load_redis(self) -> None:
        """The cached load again on a second gunicorn whose cache is Redis (REDIS_URL)."""
        url = self.cfg.redis_url
        raw = redis.Redis.from_url(url, socket_connect_timeout=2, socket_timeout=10)
        try:
            raw.ping()
            keys_before = raw.dbsize()
            version = raw.info("server").get("redis_version", "?")
        except redis.RedisError as exc:
            raw.close()
            self.rows.append(Row("load (cached, redis)", notes=f"SKIPPED: {url}: {exc}"))
            return
        if keys_before:
            raw.close()
            self.rows.append(
                Row(
                    "load (cached, redis)",
                    notes=f"SKIPPED: {url} already holds {keys_before} keys (not ours: left "
                    "alone; give an empty db with --redis-url)",
                )
            )
            return
        self.redis = raw  # ours from now on: flushed (that db only) at the end
        self.say(f"starting a second gunicorn with REDIS_URL={url}")
        env = self.server_env() | {"REDIS_URL": url}
        self.extra_server, client = self.start_server(env)
        try:
            self.load_row(self.extra_server.url, "uncached, redis", True, info=True)
            keys_after_misses = raw.dbsize()
            self.load_row(self.extra_server.url, "cached, redis", False)
            r = client.get(self.lightcurve_path(LOAD, binned=True, bust=False))
            hit = r.headers.get("X-Lcstore-Cache", "no X-Lcstore-Cache header")
            answer_keys = sum(1 for _ in raw.scan_iter(match="*lcstore:answer:*", count=1000))
            mem = raw.info("memory").get("used_memory_human", "?")
        finally:
            client.close()
            self.extra_server.stop()
            self.extra_server = None
            self._release_redis()
        self.notes.append(
            f"Redis cache: Redis {version} at {url} (a db of its own, empty at the start and "
            "flushed at the end, no other db touched); a second gunicorn on the same database "
            f"with REDIS_URL set (settings: django.core.cache.backends.redis.RedisCache). After "
            f"the uncached run the db held {keys_after_misses:,} keys (one per distinct URL); "
            f"the cached URL then answered X-Lcstore-Cache: {hit}; {answer_keys:,} answer keys, "
            f"{mem} used. The local-memory cache is one per gunicorn worker; Redis is one for "
            "all workers and hosts, at the cost of a round trip and unpickling per hit."
        )

    def phase_growth(self) -> None:
        for n in self.cfg.growth_sizes:
            rep = (
                max(self.cfg.repeats, 5)
                if n <= 100_000
                else (self.cfg.repeats if n <= 1_000_000 else 1)
            )
            self.ingest_at(n, rep, decompose=False, budget_s=90.0)
            self.binned_at(n, max(self.cfg.pull_repeats, 5) if n <= 1_000_000 else 3)
            prod, bare, _ = self.ingest_cache[n]
            self.rows.append(
                Row(
                    "growth: ingest (HTTP vs COPY)",
                    f"{n:,}",
                    seconds_text(prod.best),
                    seconds_text(bare.best),
                    prod.best / bare.best,
                    notes=f"best of {prod.n}; {n / prod.best:,.0f} rows/s",
                )
            )
        for n in self.cfg.growth_sizes:
            prod, ref, _ = self.binned_cache[n]
            self.rows.append(
                Row(
                    "growth: binned pull (HTTP vs SQL)",
                    f"{n:,}",
                    seconds_text(prod.best),
                    seconds_text(ref.best),
                    prod.best / ref.best,
                    notes=f"best of {prod.n}",
                )
            )
        if self.cfg.growth_skipped:
            self.notes.append(
                "Growth skipped "
                + ", ".join(f"{n:,}" for n in self.cfg.growth_skipped)
                + " points (over --max-points)."
            )

    def phase_isolation(self) -> None:
        n = self.cfg.iso_n
        n_others = N_OTHER_SOURCES * n
        arrays = bench.curve_arrays(n, seed=7)
        edges = 58000.0 + np.linspace(0.0, 2700.0, ISO_SLICES + 1)
        edges[-1] += 1.0
        cut = np.searchsorted(arrays["time"], edges)
        slices = [
            bench.curve_csv({k: v[cut[i] : cut[i + 1]] for k, v in arrays.items()})
            for i in range(ISO_SLICES)
        ]
        counts = np.diff(cut)

        def load_target(k: int) -> None:
            self.upload(ISO, slices[k], int(counts[k]), frame="barycentric")

        # A ~0.1 s pull against a 10 % goal: more repeats are cheap and narrow the noise.
        repeats = max(self.cfg.pull_repeats, 11)

        def measure(label: str) -> tuple[Timing, Timing]:
            self.vacuum()
            self.say(f"isolation ({label}): {repeats} repeats each side")
            return self.alternate(
                lambda: self.pull(ISO, binned=True),
                lambda: self.sql_binned(ISO),
                repeats,
            )

        def measure_alone(label: str) -> tuple[Timing, Timing]:
            self.reset_points()
            for k in range(ISO_SLICES):
                load_target(k)
            return measure(label)

        self.say(f"isolation: {n:,} points of one source in {ISO_SLICES} uploads, alone")
        small = measure_alone("alone")

        self.say(f"isolation: generating {n_others:,} points of {N_OTHER_SOURCES} other sources")
        others = [bench.curve_arrays(n, seed=1000 + s) for s in range(N_OTHER_SOURCES)]
        self.reset_points()
        other_uploads = np.array([self.dummy_upload(sid) for sid in self.other_ids])
        other_ids = np.array(self.other_ids)
        from lcstore.models import FluxPoint

        table = FluxPoint._meta.db_table
        t_copy = 0.0
        for k in range(ISO_SLICES):
            load_target(k)
            parts = []
            for s, arr in enumerate(others):
                a, b = np.searchsorted(arr["time"], edges[k : k + 2])
                parts.append((s, a, b))
            src = np.concatenate([np.full(b - a, other_ids[s]) for s, a, b in parts])
            upl = np.concatenate([np.full(b - a, other_uploads[s]) for s, a, b in parts])
            t = np.concatenate([others[s]["time"][a:b] for s, a, b in parts])
            v = np.concatenate([others[s]["value"][a:b] for s, a, b in parts])
            e = np.concatenate([others[s]["error"][a:b] for s, a, b in parts])
            self.say(f"isolation: COPY slice {k + 1}/{ISO_SLICES} of the others ({len(t):,} rows)")
            t_copy += self.copy_in(
                table,
                self.point_payload(source_id=src, upload_id=upl, t=t, value=v, error=e),
                replica=self.superuser,
            )
        self.vacuumed = False
        del others
        big = measure(f"with {n_others:,} others")
        # The two states cannot be measured alternately, and over the minute the big table
        # takes to load these machines drift by more than the goal: the source alone is
        # measured again afterwards, and the big table is compared with the mean of the two.
        again = measure_alone("alone, again")
        alone = (small[0].best + again[0].best) / 2
        alone_sql = (small[1].best + again[1].best) / 2
        self.rows.append(
            Row(
                f"isolation: binned pull, +{N_OTHER_SOURCES}x other points vs alone",
                f"{n:,}",
                seconds_text(big[0].best),
                seconds_text(alone),
                big[0].best / alone,
                1.1,
                notes=f"best of {big[0].n}; alone before and after: "
                f"{seconds_text(small[0].best)}, {seconds_text(again[0].best)}; SQL GROUP BY: "
                f"{seconds_text(big[1].best)} vs {seconds_text(alone_sql)} "
                f"({big[1].best / alone_sql:.2f}x)",
            )
        )
        self.rows.append(
            Row(
                "  (info) binned pull vs SQL, in the big table",
                f"{n:,}",
                seconds_text(big[0].best),
                seconds_text(big[1].best),
                big[0].best / big[1].best,
                notes=f"{n_others:,} other rows loaded by COPY in {t_copy:.0f} s",
            )
        )
        self.notes.append(
            f"Isolation: the source's {n:,} points arrive in {ISO_SLICES} uploads (time slices);"
            f" in the big table each upload is followed by a COPY of the same time slice of "
            f"{N_OTHER_SOURCES} other sources ({n:,} points each, {n_others:,} in all), so the "
            "source's rows lie in 10 runs spread over the heap, as in a store fed over time. "
            "VACUUM ANALYZE before each measurement. The source alone is measured before and "
            "after the big table (reloaded by the same 10 uploads), and the big-table figure is "
            "compared with the mean of the two, so a drift of the machine over the load cancels. "
            + (
                ""
                if n >= 1_000_000
                else f"(The binned source has {n:,} points, not 1,000,000, to keep the run short: "
                "100x of 1,000,000 is 1e8 rows, about 15 GB; use --isolation-points 1e6.)"
            )
        )

    # ------------------------------------------------------------------ partitioning

    def _partitioned_table(self) -> list[str]:
        """PART_TABLE: the bare table's columns, hash-partitioned by source into N_PARTITIONS,
        with the point table's index definitions replayed on it; what differs, as notes."""
        from lcstore.models import FluxPoint

        assert self.pg is not None
        point = FluxPoint._meta.db_table
        self.pg.execute(f"DROP TABLE IF EXISTS {PART_TABLE}")
        self.pg.execute(
            f"CREATE TABLE {PART_TABLE} (LIKE {point} INCLUDING DEFAULTS INCLUDING IDENTITY "
            "INCLUDING GENERATED INCLUDING STORAGE) PARTITION BY HASH (source_id)"
        )
        for r in range(N_PARTITIONS):
            self.pg.execute(
                f"CREATE TABLE {PART_TABLE}_{r} PARTITION OF {PART_TABLE} "
                f"FOR VALUES WITH (MODULUS {N_PARTITIONS}, REMAINDER {r})"
            )
        differs = []
        rows = self.pg.execute(
            "SELECT i.indexname, i.indexdef, x.indisprimary, x.indisunique FROM pg_indexes i "
            "JOIN pg_class c ON c.relname = i.indexname JOIN pg_index x ON x.indexrelid = c.oid "
            "WHERE i.tablename = %s ORDER BY i.indexname",
            [point],
        ).fetchall()
        for name, indexdef, primary, unique in rows:
            cols = re.search(r"\(([^)]*)\)", indexdef)
            if primary:
                # A unique index of a partitioned table must hold the partition key.
                key = cols.group(1) if cols else "id"
                self.pg.execute(f"ALTER TABLE {PART_TABLE} ADD PRIMARY KEY ({key}, source_id)")
                differs.append(f"primary key ({key}, source_id) instead of ({key})")
                continue
            if unique and cols and "source_id" not in cols.group(1):
                differs.append(f"unique index {name} left out (no source_id in it)")
                continue
            self.pg.execute(
                re.sub(
                    r"INDEX \S+ ON \S+",
                    f"INDEX {name}_part ON {PART_TABLE}",
                    indexdef,
                    count=1,
                )
            )
        return differs

    def _explain(self, table: str, source_id: int) -> tuple[str, int]:
        """The scans of the binned SQL (node, relation, heap fetches, buffers); all buffers."""
        assert self.pg is not None
        sql = BINNED_SQL.format(table=table)
        plan = self.pg.execute(
            f"EXPLAIN (ANALYZE, BUFFERS, FORMAT JSON) {sql}", [source_id, self.band.pk]
        ).fetchone()[0][0]["Plan"]
        scans: list[dict[str, Any]] = []

        def walk(node: dict[str, Any]) -> None:
            if "Scan" in node["Node Type"] and "Relation Name" in node:
                scans.append(node)
            for child in node.get("Plans", []):
                walk(child)

        walk(plan)
        parts = []
        for node in scans:
            fetches = node.get("Heap Fetches")
            parts.append(
                f"{node['Node Type']} on {node['Relation Name']}"
                + (f" ({node['Index Name']})" if node.get("Index Name") else "")
                + (f", heap fetches {fetches}" if fetches is not None else "")
                + f", buffers hit {node.get('Shared Hit Blocks', 0)}"
                f" read {node.get('Shared Read Blocks', 0)}"
            )
        blocks = sum(n.get("Shared Hit Blocks", 0) + n.get("Shared Read Blocks", 0) for n in scans)
        return "; ".join(parts) or plan["Node Type"], blocks

    def phase_partition(self) -> None:
        """The binned SQL on the bare table vs a hash-partitioned copy, on the same rows.

        The rows are the isolation phase's: one source of ``iso_n`` points (the same
        generator and seed) in ISO_SLICES time slices, each slice followed by the same
        slice of N_OTHER_SOURCES other sources (``iso_n`` points each), here written by
        COPY to both tables, slice by slice, alternately. The real point table is not
        touched.
        """
        assert self.pg is not None
        n = self.cfg.iso_n
        n_all = (N_OTHER_SOURCES + 1) * n
        target = int(self.sources[ISO].pk)
        self.say(f"partition: hash-partitioned copy ({N_PARTITIONS} partitions by source_id)")
        differs = self._partitioned_table()
        self.pg.execute(f"TRUNCATE {BARE_TABLE}")
        self.say(f"partition: generating {n_all:,} rows (the isolation phase's)")
        arrays = bench.curve_arrays(n, seed=7)
        others = [bench.curve_arrays(n, seed=1000 + s) for s in range(N_OTHER_SOURCES)]
        ids = [target, *self.other_ids]
        curves = [arrays, *others]
        edges = 58000.0 + np.linspace(0.0, 2700.0, ISO_SLICES + 1)
        edges[-1] += 1.0
        copy_s = {BARE_TABLE: 0.0, PART_TABLE: 0.0}
        for k in range(ISO_SLICES):
            cuts = [np.searchsorted(c["time"], edges[k : k + 2]) for c in curves]
            # the target's slice first (its upload), then the others' (as in isolation)
            src = np.concatenate([np.full(b - a, ids[i]) for i, (a, b) in enumerate(cuts)])
            t = np.concatenate([curves[i]["time"][a:b] for i, (a, b) in enumerate(cuts)])
            v = np.concatenate([curves[i]["value"][a:b] for i, (a, b) in enumerate(cuts)])
            e = np.concatenate([curves[i]["error"][a:b] for i, (a, b) in enumerate(cuts)])
            payload = list(
                self.point_payload(source_id=src, upload_id=k + 1, t=t, value=v, error=e)
            )
            order = (BARE_TABLE, PART_TABLE) if k % 2 == 0 else (PART_TABLE, BARE_TABLE)
            self.say(f"partition: COPY slice {k + 1}/{ISO_SLICES} ({len(t):,} rows) to both")
            for table in order:
                copy_s[table] += self.copy_in(table, payload)
        del others, curves, payload
        self.say("partition: VACUUM (ANALYZE) of both tables")
        for table in (BARE_TABLE, PART_TABLE):
            self.pg.execute(f"VACUUM (ANALYZE) {table}")
        counts = {
            t: self.pg.execute(f"SELECT count(*) FROM {t}").fetchone()[0]
            for t in (BARE_TABLE, PART_TABLE)
        }
        sizes = {
            t: self.pg.execute(
                "SELECT sum(pg_total_relation_size(r)) FROM ("
                "SELECT %s::regclass AS r UNION ALL "
                "SELECT inhrelid::regclass FROM pg_inherits WHERE inhparent = %s::regclass) q",
                [t, t],
            ).fetchone()[0]
            for t in (BARE_TABLE, PART_TABLE)
        }
        part_of = self.pg.execute(
            f"SELECT tableoid::regclass::text, count(*) FROM {PART_TABLE} "
            f"WHERE source_id = %s GROUP BY 1",
            [target],
        ).fetchone()
        in_partition = self.pg.execute(f"SELECT count(*) FROM {part_of[0]}").fetchone()[0]

        def sql(table: str) -> Callable[[], list[tuple[Any, ...]]]:
            q = BINNED_SQL.format(table=table)
            return lambda: self.pg.execute(q, [target, self.band.pk]).fetchall()  # type: ignore[union-attr]

        repeats = max(self.cfg.pull_repeats, 9)  # a short query: more repeats are cheap
        self.say(f"partition: binned SQL, {repeats} repeats each layout")
        bare, part = self.alternate(sql(BARE_TABLE), sql(PART_TABLE), repeats)
        same = sql(BARE_TABLE)() == sql(PART_TABLE)()
        plan_bare, blocks_bare = self._explain(BARE_TABLE, target)
        plan_part, blocks_part = self._explain(PART_TABLE, target)
        ratio = part.best / bare.best
        # Run-to-run spread of this run (median over best, the larger side), at least 10%.
        spread = max(0.10, *(float(np.median(t.runs)) / t.best - 1.0 for t in (bare, part)))
        pages = f"the scans read {blocks_part:,} vs {blocks_bare:,} buffers"
        if ratio <= 1.0 - spread:
            verdict = f"partitioning pays here: the pull is {1 / ratio:.2f}x faster ({pages})"
        elif ratio >= 1.0 + spread:
            verdict = f"partitioning costs here: the pull is {ratio:.2f}x slower ({pages})"
        else:
            verdict = (
                f"partitioning does not pay here: {ratio:.2f}x is within this run's "
                f"run-to-run spread of {spread:.0%} and {pages} (an index scan of one source "
                "reads the same index entries whichever table holds them)"
            )
        self.rows.append(
            Row(
                f"partition: binned SQL, hash x{N_PARTITIONS} by source vs one table",
                f"{n:,}",
                seconds_text(part.best),
                seconds_text(bare.best),
                ratio,
                notes=f"best of {part.n}; {counts[PART_TABLE]:,} rows in each layout; "
                f"results {'equal' if same else 'DIFFERENT'}",
            )
        )
        self.rows.append(
            Row(
                "  (info) COPY of the same rows, partitioned vs one table",
                f"{n_all:,}",
                seconds_text(copy_s[PART_TABLE]),
                seconds_text(copy_s[BARE_TABLE]),
                copy_s[PART_TABLE] / copy_s[BARE_TABLE],
                notes=f"{ISO_SLICES} COPYs each, alternately; on disk "
                f"{sizes[PART_TABLE] / 2**20:,.0f} MB vs {sizes[BARE_TABLE] / 2**20:,.0f} MB",
            )
        )
        same_idx = "; ".join(differs) if differs else "none"
        self.notes.append(
            f"Partition: {PART_TABLE} = (LIKE the point table) PARTITION BY HASH (source_id), "
            f"{N_PARTITIONS} partitions, the point table's index definitions (covering "
            f"(source, band, t) INCLUDE (...) and (source, upload)) replayed on it; "
            f"differences from the bare table: {same_idx}. Rows: the isolation phase's "
            f"({n:,} points of the binned source, {N_OTHER_SOURCES} others of {n:,}, "
            f"{ISO_SLICES} interleaved time slices), COPY to both; VACUUM ANALYZE of both. "
            f"The binned source's partition {part_of[0]} holds {in_partition:,} of "
            f"{counts[PART_TABLE]:,} rows. Plans (EXPLAIN ANALYZE, BUFFERS) - one table: "
            f"{plan_bare}; partitioned: {plan_part}. Verdict: {verdict}."
        )
        self.pg.execute(f"DROP TABLE {PART_TABLE}")
        self.pg.execute(f"TRUNCATE {BARE_TABLE}")

    def phase_lags(self) -> None:
        from lcstore.science import lags

        n = self.cfg.lag_n
        ta, a, ea, tb, b, eb = bench.lagged_pair(n, seed=11)
        self.say(f"lags: DCF and ZDCF on 2 x {n:,} points")
        t_dcf = best_of(
            lambda: lags.dcf(ta, a, ea, tb, b, eb, lag_min=-100.0, lag_max=100.0, lag_step=1.0),
            self.cfg.repeats,
            warmup=1,
        )
        t_zdcf = best_of(
            lambda: lags.zdcf(ta, a, ea, tb, b, eb, lag_min=-100.0, lag_max=100.0),
            self.cfg.repeats,
            warmup=1,
        )
        self.rows.append(
            Row(
                "lags: DCF, lags -100..100 d, step 1 d",
                f"2 x {n:,}",
                seconds_text(t_dcf.best),
                notes=f"best of {t_dcf.n}",
            )
        )
        self.rows.append(
            Row(
                "lags: ZDCF, pairs with |lag| <= 100 d",
                f"2 x {n:,}",
                seconds_text(t_zdcf.best),
                notes=f"best of {t_zdcf.n}",
            )
        )
        self._lags_oracle()

    def _lags_oracle(self) -> None:
        from lcstore.science import lags

        m = self.cfg.oracle_n
        venv = Path(os.environ.get("ZDCF_VENV") or BASE_DIR / ".zdcf-venv")
        python = venv / "bin" / "python"
        if not python.exists():
            self.say("building the pyzdcf oracle venv (tests/oracles/make_zdcf_env.sh)")
            subprocess.run(
                ["bash", str(BASE_DIR / "tests" / "oracles" / "make_zdcf_env.sh")],
                env={**os.environ, "ZDCF_VENV": str(venv)},
                timeout=900,
                check=False,
            )
        if not python.exists():
            self.rows.append(
                Row("lags: ZDCF vs pyzdcf", f"2 x {m:,}", notes="SKIPPED: no oracle venv")
            )
            return
        for seed in range(13, 63):  # bounded: about 1 in 5 seeds has a tied median lag
            ta, a, ea, tb, b, eb = bench.lagged_pair(m, seed=seed, dyadic=True)
            if not bench.median_lag_tied(ta, tb):
                break
        self.notes.append(
            f"ZDCF vs pyzdcf: 2 x {m:,} points on a 2^-12-day grid (times and lags exact in "
            "float32, as pyzdcf stores lags), seed chosen so that the median lag, where both "
            "programs start binning, is not shared by two pairs: pyzdcf orders equal lags by "
            "an unstable heapsort, so with a tied median the two bins beside it can hold "
            "different pairs (seen on a 1/64-day grid: 2 of 93 bins, 2 pairs of 1,864). "
            "pyzdcf's edge bins with fewer than 11 pairs are left out, as in "
            "tests/science/test_lags.py."
        )
        ours = best_of(lambda: lags.zdcf(ta, a, ea, tb, b, eb), self.cfg.repeats, warmup=1)
        lf = lags.zdcf(ta, a, ea, tb, b, eb)
        with tempfile.TemporaryDirectory(prefix="lcbench-zdcf-") as d:
            np.savetxt(
                Path(d) / "lc1.csv", np.column_stack([ta, a, ea]), delimiter=",", fmt="%.17g"
            )
            np.savetxt(
                Path(d) / "lc2.csv", np.column_stack([tb, b, eb]), delimiter=",", fmt="%.17g"
            )
            startup = best_of(
                lambda: subprocess.run(
                    [str(python), "-c", "import pyzdcf"],
                    check=True,
                    capture_output=True,
                    timeout=120,
                ),
                3,
            )
            self.say(f"lags: pyzdcf on 2 x {m:,} points (one run; this takes a while)")
            t0 = time.perf_counter()
            out = subprocess.run(
                [str(python), str(BASE_DIR / "tests" / "oracles" / "run_pyzdcf.py"), d],
                capture_output=True,
                text=True,
                check=True,
                timeout=3600,
            ).stdout
            wall = time.perf_counter() - t0
        ref = np.genfromtxt(io.StringIO(out), delimiter=",", skip_header=1)
        ref = ref[ref[:, 6] >= 11]
        if len(lf) != ref.shape[0] or not np.array_equal(lf.n_pairs, ref[:, 6]):
            equal = f"DIFFERENT: {len(lf)} vs {ref.shape[0]} bins, or pair counts differ"
        else:
            # The comparison of tests/science/test_lags.py (pyzdcf oracle, REFERENCES §5).
            pairs = [
                ("lag", lf.lag, ref[:, 0], 1e-9),
                ("-sigma lag", lf.lag - lf.lag_lo, ref[:, 1], 1e-9),
                ("+sigma lag", lf.lag_hi - lf.lag, ref[:, 2], 1e-9),
                ("r", lf.coefficient, ref[:, 3], 1e-12),
                ("-err r", lf.error_lo, ref[:, 4], 1e-12),
                ("+err r", lf.error_hi, ref[:, 5], 1e-12),
            ]
            ok = all(np.allclose(x, y, rtol=1e-9, atol=atol) for _, x, y, atol in pairs)
            worst = ", ".join(f"{k} {np.max(np.abs(x - y)):.1e}" for k, x, y, _ in pairs)
            equal = f"{'equal' if ok else 'DIFFERENT'} over {len(lf)} bins (max |diff| {worst})"
        net = wall - startup.best
        self.rows.append(
            Row(
                "lags: ZDCF vs pyzdcf (all pairs), speed-up",
                f"2 x {m:,}",
                seconds_text(ours.best),
                seconds_text(net),
                net / ours.best,
                10.0,
                higher_is_better=True,
                notes=f"ours best of {ours.n}; pyzdcf 1 run, {wall:.1f} s wall minus "
                f"{startup.best:.2f} s interpreter+import start-up; results {equal}",
            )
        )

    # ------------------------------------------------------------------ profiles

    def run_profiles(self) -> None:
        from django.test import Client

        from lcstore.services import UploadParams, upload_create

        n = self.cfg.main_n
        _, data = self.curve(n)
        fields = self.upload_fields(MAIN, self.cfg.frame)
        self.reset_points()
        params = UploadParams(
            instrument=fields["instrument"],
            source=MAIN,
            band=fields["band"],
            value_unit="mJy",
            time_format="mjd",
            time_scale=fields["time_scale"],
            time_reference=fields["time_reference"],
        )
        self.say("profiling upload_create in-process")
        prof = cProfile.Profile()
        prof.runcall(
            upload_create,
            uploader=self.user,
            data=data,
            file_name="bench.csv",
            params=params,
            max_rows=settings.LCSTORE_MAX_ROWS,
            max_columns=settings.LCSTORE_MAX_COLUMNS,
        )
        self.profiles.append(_profile_text(f"upload_create, {n:,} rows", prof))
        self.state = {MAIN: n}
        self.vacuumed = False
        self.vacuum()
        client = Client(HTTP_AUTHORIZATION=f"Token {self.token}", HTTP_HOST="localhost")
        for binned in (True, False):
            path = self.lightcurve_path(MAIN, binned=binned, bust=self.cache_present)
            _drain(client.get(path))  # warm-up
            path = self.lightcurve_path(MAIN, binned=binned, bust=self.cache_present)
            self.say(f"profiling GET {path} in-process")
            prof = cProfile.Profile()
            prof.runcall(lambda p=path: _drain(client.get(p)))
            self.profiles.append(_profile_text(f"GET {path}", prof))

    # ------------------------------------------------------------------ driver

    def run(self) -> None:
        for phase in PHASES:
            if phase in self.cfg.phases:
                t0 = time.perf_counter()
                getattr(self, f"phase_{phase}")()
                self.say(f"phase {phase} done in {time.perf_counter() - t0:.0f} s")
        if self.cfg.profile:
            self.run_profiles()


def _drain(response: Any) -> int:
    if getattr(response, "streaming", False):
        return sum(len(c) for c in response.streaming_content)
    return len(response.content)


def _profile_text(title: str, prof: cProfile.Profile) -> str:
    buf = io.StringIO()
    stats = pstats.Stats(prof, stream=buf)
    stats.strip_dirs().sort_stats("cumulative").print_stats(30)
    buf.write("\n  -- by own time --\n")
    stats.sort_stats("tottime").print_stats(15)
    text = re.sub(r"\n{3,}", "\n\n", buf.getvalue())
    return f"### {title}\n{text}"


def _curve_cache_present() -> bool:
    """Whether the service caches curve answers (Django's cache framework in its code)."""
    pattern = re.compile(r"django\.core\.cache|cache_page|\bcaches\[")
    for folder in (BASE_DIR / "lcstore", BASE_DIR / "api"):
        for path in folder.rglob("*.py"):
            if path.name in ("bench.py", "lcbench.py") or "migrations" in path.parts:
                continue
            try:
                if pattern.search(path.read_text(errors="ignore")):
                    return True
            except OSError:
                continue
    return False


class Command(BaseCommand):
    help = (
        "Benchmark lcstore against PostgreSQL itself on a fresh database (lcbench_<pid>) and "
        "print one table of figures and ratios against the goals of the performance issue."
    )

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument("--quick", action="store_true", help="smoke run: 1e5 rows, short load")
        parser.add_argument(
            "--only",
            default="",
            help=f"comma list of phases to run: {','.join(PHASES)} (default: all but partition)",
        )
        parser.add_argument(
            "--max-points",
            type=_count,
            default=None,
            help="largest growth size (default 1e6; 1e7 adds about 5 minutes)",
        )
        parser.add_argument("--repeats", type=int, default=3, help="repeats of the long figures")
        parser.add_argument(
            "--pull-repeats", type=int, default=5, help="repeats of the short (pull) figures"
        )
        parser.add_argument(
            "--isolation-points",
            type=_count,
            default=None,
            help="points of the isolated source (default 1e5; 100x as many others are loaded)",
        )
        parser.add_argument("--load-points", type=_count, default=None)
        parser.add_argument("--load-seconds", type=int, default=None)
        parser.add_argument("--load-connections", type=int, default=None)
        parser.add_argument(
            "--frame",
            choices=["topocentric", "barycentric"],
            default="topocentric",
            help="time system of the uploaded CSV (topocentric UTC needs the light-time step)",
        )
        parser.add_argument(
            "--redis-url",
            default=DEFAULT_REDIS_URL,
            help="an EMPTY Redis db for the Redis-cached load run; flushed at the end "
            f"(default {DEFAULT_REDIS_URL})",
        )
        parser.add_argument(
            "--profile",
            action="store_true",
            help="also cProfile upload_create and the two pulls in-process and print the top",
        )

    def handle(self, *args: Any, **opts: Any) -> None:
        if connection.vendor != "postgresql":
            self._reexec_on_postgresql()
            return
        cfg = self._config(opts)
        previous = signal.signal(signal.SIGTERM, _raise_exit)
        started = time.perf_counter()
        run = Bench(cfg, progress=self._progress)
        failure: BaseException | None = None
        try:
            run.open()
            run.run()
        except BaseException as exc:  # report what was measured, then re-raise
            failure = exc
            if run.server is not None:
                self.stderr.write("server log tail:\n" + run.server.log_tail())
        finally:
            try:
                run.close()
            finally:
                signal.signal(signal.SIGTERM, previous)
        self._report(run, cfg, time.perf_counter() - started, failure)
        if failure is not None:
            raise failure

    # ------------------------------------------------------------------ helpers

    def _progress(self, msg: str) -> None:
        self.stderr.write(f"[{dt.datetime.now():%H:%M:%S}] {msg}")
        self.stderr.flush()

    def _reexec_on_postgresql(self) -> None:
        url = os.environ.get("DATABASE_URL") or DEFAULT_SERVER
        if "lcbench" not in sys.argv:
            raise CommandError(
                f"lcbench needs PostgreSQL: set DATABASE_URL (e.g. {DEFAULT_SERVER})"
            )
        argv = sys.argv[sys.argv.index("lcbench") :]
        self._progress(f"no PostgreSQL in the settings: running on {url}")
        code = subprocess.call(
            [sys.executable, str(BASE_DIR / "manage.py"), *argv],
            env={**os.environ, "DATABASE_URL": url},
        )
        if code:
            raise CommandError(f"lcbench exited with {code}")

    def _config(self, opts: dict[str, Any]) -> Config:
        phases = tuple(p.strip() for p in opts["only"].split(",") if p.strip()) or DEFAULT_PHASES
        unknown = [p for p in phases if p not in PHASES]
        if unknown:
            raise CommandError(f"unknown phase(s) {', '.join(unknown)}; known: {', '.join(PHASES)}")
        quick = opts["quick"]
        max_points = opts["max_points"] or (100_000 if quick else 1_000_000)
        main_n = min(100_000 if quick else 1_000_000, max_points)
        sizes = tuple(n for n in GROWTH_SIZES if n <= max_points)
        skipped = tuple(n for n in GROWTH_SIZES if n > max_points)
        cores = os.cpu_count() or 1
        return Config(
            phases=phases,
            main_n=main_n,
            growth_sizes=sizes,
            growth_skipped=skipped,
            repeats=max(1, opts["repeats"]),
            pull_repeats=max(3, opts["pull_repeats"]),
            iso_n=opts["isolation_points"] or (10_000 if quick else 100_000),
            load_n=opts["load_points"] or (10_000 if quick else 100_000),
            load_seconds=opts["load_seconds"] or (5 if quick else 20),
            load_connections=opts["load_connections"] or 2 * cores,
            lag_n=2_000 if quick else 10_000,
            oracle_n=500 if quick else 2_000,
            frame=opts["frame"],
            profile=opts["profile"],
            workers=cores,
            redis_url=opts["redis_url"],
        )

    def _report(
        self, run: Bench, cfg: Config, elapsed: float, failure: BaseException | None
    ) -> None:
        w = self.stdout.write
        w("")
        w(
            f"lcbench — {dt.datetime.now(dt.UTC):%Y-%m-%d %H:%M} UTC — fresh database "
            f"lcbench_{os.getpid()} (dropped at the end)"
        )
        argv = sys.argv[sys.argv.index("lcbench") :] if "lcbench" in sys.argv else ["lcbench"]
        w(f"command: python manage.py {' '.join(argv)}")
        for k, v in run.facts:
            w(f"  {k:<20} {v}")
        w("")
        w(bench.format_table(run.rows))
        w("")
        w("Notes")
        w(
            "- Times are wall-clock seconds, best of N repeats (N in the notes column); the two "
            "sides of a ratio were measured alternately in the same run. ratio = lcstore / "
            "reference (lower is better), except the pyzdcf row (speed-up, higher is better)."
        )
        w(
            f"- Server: gunicorn, {cfg.workers} sync workers (= cores), on a loopback port; "
            "client: httpx in this process; reference: psycopg 3 on the same server."
        )
        w(
            "- Reference pulls: one SQL GROUP BY floor(t) weighted mean (sum(v/e^2)/sum(1/e^2), "
            "error sum(1/e^2)^-1/2) fetched to the client; COPY (SELECT band, t, value, error, "
            "upper_limit, instrument, upload ... ORDER BY t) TO STDOUT (FORMAT csv)."
        )
        cache = "found in the code" if run.cache_present else "none in the code (no cache yet)"
        w(f"- Curve-answer cache: {cache}.")
        w(
            "- The bench server runs with LCSTORE_THROTTLE_{UPLOADS,HEAVY,READ}=off (request "
            "budgets would otherwise answer 429 during the run)."
        )
        for note in run.notes:
            w(f"- {note}")
        skipped = [p for p in PHASES if p not in cfg.phases]
        if skipped:
            w(f"- Phases not run (--only): {', '.join(skipped)}.")
        if failure is not None:
            w(f"- THE RUN FAILED: {type(failure).__name__}: {failure}")
        w(
            f"- Total run time {elapsed / 60:.1f} min; load average at the end {bench.loadavg_text()}."
        )
        for p in run.profiles:
            w("")
            w(p)


def _raise_exit(signum: int, frame: Any) -> None:
    raise SystemExit(128 + signum)
