"""Backup and restore, as README "Backup and restore" says, with the real tools.

The procedure under test is PostgreSQL's own (PostgreSQL manual, "SQL Dump":
``pg_dump -Fc`` of the database, ``pg_restore`` into a fresh one). lcstore keeps
everything in the database, the uploaded files' bytes included
(``StoredFile.content``), so the dump is the whole store. The check: the same
requests answered by the app on the original and on the restored database give
byte-identical answers. Both sides are answered by the same program (a fresh
interpreter running the app with ``DATABASE_URL``), so nothing but the database
differs.
"""

from __future__ import annotations

import base64
import datetime as dt
import json
import os
import re
import shutil
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import psycopg
import pytest
from django.db import connection
from django.utils import timezone

ROOT = Path(__file__).resolve().parent.parent
live = pytest.mark.django_db(transaction=True, serialized_rollback=True)

BARY = {
    "instrument": "hollow-hill-1m",
    "time_format": "mjd",
    "time_scale": "tdb",
    "time_reference": "BARYCENTER",
}

# Answers the requests given on stdin (token, path) with the app on DATABASE_URL.
ANSWER = r"""
import base64, json, sys
import django
django.setup()
from django.test import Client
out = []
for token, path in json.load(sys.stdin):
    r = Client().get(path, HTTP_AUTHORIZATION=f"Token {token}")
    body = b"".join(r.streaming_content) if r.streaming else r.content
    out.append({"status": r.status_code, "type": r.get("Content-Type"),
                "body": base64.b64encode(body).decode()})
json.dump(out, sys.stdout)
"""


def _server() -> dict[str, Any]:
    s = connection.settings_dict
    return {
        "host": s["HOST"] or "127.0.0.1",
        "port": int(s["PORT"] or 5432),
        "user": s["USER"] or "postgres",
        "password": s["PASSWORD"] or None,
    }


def _url(dbname: str) -> str:
    sv = _server()
    auth = sv["user"] + (f":{sv['password']}" if sv["password"] else "")
    return f"postgres://{auth}@{sv['host']}:{sv['port']}/{dbname}"


def _tool(name: str, major: int) -> Path | None:
    """The server's own major version of pg_dump/pg_restore (an older one refuses; a
    newer one writes archives an older pg_restore cannot read)."""
    own = Path(f"/usr/lib/postgresql/{major}/bin/{name}")
    if own.exists():
        return own
    found = shutil.which(name)
    if found:
        text = subprocess.run([found, "--version"], capture_output=True, text=True).stdout
        m = re.search(r"\s(\d+)(?:\.\d+)?", text)
        if m and int(m.group(1)) == major:
            return Path(found)
    return None


@pytest.fixture
def tools(db: Any) -> dict[str, Path]:
    with connection.cursor() as cursor:
        cursor.execute("SHOW server_version_num")
        major = int(cursor.fetchone()[0]) // 10000
    found = {n: _tool(n, major) for n in ("pg_dump", "pg_restore")}
    missing = [n for n, p in found.items() if p is None]
    if missing:
        pytest.skip(
            f"{', '.join(missing)} for PostgreSQL {major} not found "
            f"(/usr/lib/postgresql/{major}/bin or PATH): the backup procedure cannot be run"
        )
    return found  # type: ignore[return-value]


@pytest.fixture
def restored_name(tools: dict[str, Path]) -> Iterator[str]:
    """A fresh database for the restore, dropped at the end whatever happens."""
    name = f"{connection.settings_dict['NAME']}_restored"[:63]
    sv = _server()
    with psycopg.connect(dbname="postgres", autocommit=True, **sv) as admin:
        admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        admin.execute(f'CREATE DATABASE "{name}"')
    try:
        yield name
    finally:
        with psycopg.connect(dbname="postgres", autocommit=True, **sv) as admin:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


def _env(dbname: str) -> dict[str, str]:
    env = {**os.environ, "DATABASE_URL": _url(dbname), "DJANGO_SETTINGS_MODULE": "lcstore.settings"}
    for scope in ("READ", "HEAVY", "UPLOADS"):
        env[f"LCSTORE_THROTTLE_{scope}"] = "1000000/hour"
    if _server()["password"]:
        env["PGPASSWORD"] = _server()["password"]
    return env


def _answers(dbname: str, requests: list[tuple[str, str]]) -> list[dict[str, Any]]:
    proc = subprocess.run(
        [sys.executable, "-c", ANSWER],
        input=json.dumps(requests),
        capture_output=True,
        text=True,
        cwd=ROOT,
        env=_env(dbname),
        timeout=300,
    )
    assert proc.returncode == 0, proc.stderr[-3000:]
    return json.loads(proc.stdout)


def _rows(t0: float, n: int, f: Any) -> str:
    return "time,value,error\n" + "".join(f"{t0 + i:.4f},{f(i):.5f},0.02\n" for i in range(n))


def _state(dbname: str) -> tuple[dict[str, int], dict[str, int | None]]:
    """Rows per table and every sequence's position."""
    with psycopg.connect(dbname=dbname, autocommit=True, **_server()) as conn:
        tables = [
            r[0]
            for r in conn.execute(
                "SELECT tablename FROM pg_tables WHERE schemaname = 'public' ORDER BY 1"
            )
        ]
        counts = {t: conn.execute(f'SELECT count(*) FROM "{t}"').fetchone()[0] for t in tables}
        seqs = dict(conn.execute("SELECT sequencename, last_value FROM pg_sequences").fetchall())
    return counts, seqs


@live
def test_pg_dump_and_pg_restore_give_back_the_same_answers(
    tools,
    restored_name,
    tmp_path,
    catalogue,
    contributor,
    other_contributor,
    curator,
    client_for,
    upload_file,
):
    from rest_framework.authtoken.models import Token

    from lcstore.models import StoredFile, Upload

    ada, bram, cleo = client_for(contributor), client_for(other_contributor), client_for(curator)
    # A small campaign: R in mJy and V in Vega magnitudes for 30 nights, a second R
    # file later retracted, a curated change of the V zero point (re-derives the V
    # upload), and an embargoed R upload by another contributor.
    r = upload_file(
        ada,
        _rows(60000, 30, lambda i: 2 + (i % 7) * 0.1),
        "r.csv",
        source="tarn-7",
        band="r",
        value_unit="mJy",
        **BARY,
    )
    assert r.status_code == 201, r.json()
    r = upload_file(
        ada,
        _rows(60000.2, 30, lambda i: 14.5 - (i % 7) * 0.05),
        "v.csv",
        source="tarn-7",
        band="v",
        value_unit="mag",
        **BARY,
    )
    assert r.status_code == 201, r.json()
    r = upload_file(
        ada,
        _rows(60000.5, 10, lambda i: 9.0),
        "r-bad.csv",
        source="tarn-7",
        band="r",
        value_unit="mJy",
        reduction="wrong aperture",
        **BARY,
    )
    assert r.status_code == 201, r.json()
    bad = r.json()["id"]
    as_of = timezone.now().astimezone(dt.UTC).isoformat().replace("+00:00", "Z")
    r = ada.post(f"/api/v1/uploads/{bad}/retract/", {"reason": "wrong aperture"}, format="json")
    assert r.status_code == 200, r.json()
    r = cleo.patch("/api/v1/bands/v/", {"zero_point_jy": 3650.0}, format="json")
    assert r.status_code == 200 and r["X-Lcstore-Rederived"], r.content
    r = upload_file(
        bram,
        _rows(60040, 5, lambda i: 3.0),
        "r-embargo.csv",
        source="tarn-7",
        band="r",
        value_unit="mJy",
        embargo_until="2099-01-01T00:00:00Z",
        **BARY,
    )
    assert r.status_code == 201, r.json()
    assert Upload.objects.count() == 5 and StoredFile.objects.count() == 4

    ta = Token.objects.get_or_create(user=contributor)[0].key
    tb = Token.objects.get_or_create(user=other_contributor)[0].key
    curve = "/api/v1/sources/tarn-7/lightcurve/"
    paths = [
        f"{curve}?format=csv",
        f"{curve}?format=json",
        f"{curve}?bin=1d&format=csv",
        f"{curve}?bin=1d&format=json",
        f"{curve}?bands=v&unit=mag&format=csv",
        f"{curve}?bands=v&format=csv",
        f"{curve}?bands=v&as_of={as_of}&format=csv",
        f"{curve}?as_of={as_of}&format=csv",
        f"{curve}?as_of={as_of}&bin=1d&format=json",
        "/api/v1/sources/tarn-7/correlation/?x=r&y=v&bin=1d&format=json",
        f"/api/v1/sources/tarn-7/correlation/?x=r&y=v&bin=1d&as_of={as_of}&format=json",
        "/api/v1/uploads/?format=json",
    ]
    paths += [f"/api/v1/uploads/{u}/file/" for u in Upload.objects.values_list("pk", flat=True)]
    embargoed = f"/api/v1/uploads/{Upload.objects.get(embargo_until__isnull=False).pk}/file/"
    requests = [(tok, p) for tok in (ta, tb) for p in paths]

    original = connection.settings_dict["NAME"]
    dump = tmp_path / "lcstore.dump"
    sv = _server()
    conn_args = ["-h", sv["host"], "-p", str(sv["port"]), "-U", sv["user"]]
    subprocess.run(
        [tools["pg_dump"], "-Fc", *conn_args, "-d", original, "-f", dump],
        check=True,
        env=_env(original),
        timeout=300,
    )
    subprocess.run(
        [
            tools["pg_restore"],
            "--exit-on-error",
            "--no-owner",
            *conn_args,
            "-d",
            restored_name,
            dump,
        ],
        check=True,
        env=_env(original),
        timeout=300,
    )

    before = _answers(original, requests)
    after = _answers(restored_name, requests)
    for (tok, path), a, b in zip(requests, before, after, strict=True):
        who = "ada" if tok == ta else "bram"
        hidden = who == "ada" and path == embargoed  # someone else's embargoed file
        assert a["status"] == (404 if hidden else 200), (who, path, base64.b64decode(a["body"]))
        assert (b["status"], b["type"]) == (a["status"], a["type"]), (who, path)
        assert b["body"] == a["body"], f"{who} {path}: the restored answer differs"
    # The comparison covers the states that matter: the retraction, the curated
    # change and the embargo each change an answer, and as_of sees the old state.
    answer = {
        (tok, p): base64.b64decode(a["body"]) for (tok, p), a in zip(requests, before, strict=True)
    }
    now_csv, then_csv = (
        answer[ta, f"{curve}?format=csv"],
        answer[ta, f"{curve}?as_of={as_of}&format=csv"],
    )
    assert f",{bad}\n".encode() not in now_csv and f",{bad}\n".encode() in then_csv
    assert answer[tb, f"{curve}?format=csv"].count(b"\n") == now_csv.count(b"\n") + 5
    # the V points before and after the zero point 3636 -> 3650 Jy: 30 rows each, other values
    v_now, v_then = (
        answer[ta, f"{curve}?bands=v&format=csv"],
        answer[ta, f"{curve}?bands=v&as_of={as_of}&format=csv"],
    )
    assert v_now.count(b"\n") == v_then.count(b"\n") == 31 and v_now != v_then
    file_paths = [p for p in paths if p.endswith("/file/")]
    assert {answer[ta, p] for p in file_paths} >= {
        _rows(60000, 30, lambda i: 2 + (i % 7) * 0.1).encode()
    }
    # and the restored store goes on where the original stopped
    assert _state(restored_name) == _state(original)
