"""Role × endpoint matrix: who may do what, and who sees embargoed data (DESIGN.md §4).

Anchors: OWASP API Security Top 10 2023 —
API1 Broken Object Level Authorization (someone else's embargoed upload, its file,
its points in curves and summaries, someone else's job or upload to retract);
API5 Broken Function Level Authorization (curated writes by non-curators, uploads
by readers, anonymous access).

Every row of ``MATRIX`` is one endpoint; its columns are the expected status for
each role in ``ROLES``, and, where the answer holds data, how many embargoed and
public points (or records) each role must see. The world is built once for the
module (inside a transaction rolled back at the end); each row is one test, and
each role's request runs in its own savepoint, so a write by one role (a
retraction, a deleted source) is never seen by the next.
"""

from __future__ import annotations

import datetime as dt
import io
import json
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np
import pytest
from django.db import transaction
from django.utils import timezone

pytestmark = pytest.mark.django_db

ROLES = (
    "anonymous",
    "anonymous, public read",
    "reader",
    "contributor",
    "other contributor",
    "curator",
    "superuser",
)
N_PUBLIC = 30  # points of the contributor's open upload (band r)
N_EMBARGOED = 30  # points of the contributor's embargoed upload (band v)
PUB, ALL = N_PUBLIC, N_PUBLIC + N_EMBARGOED
BARY = dict(time_format="mjd", time_scale="tdb", time_reference="BARYCENTER")


def _csv(t: np.ndarray, value: float) -> bytes:
    return (
        "time,value,error\n"
        + "".join(f"{x:.3f},{value + 0.01 * i:.4f},0.05\n" for i, x in enumerate(t))
    ).encode()


@pytest.fixture(scope="module")
def world(django_db_setup: Any, django_db_blocker: Any) -> Iterator[dict[str, Any]]:
    """Accounts of every role, a source with an open and an embargoed upload, and a job."""
    from django.contrib.auth.models import Group, User
    from rest_framework.authtoken.models import Token

    from lcstore.models import Band, Instrument, Job, JobState, Source
    from lcstore.services import UploadParams, upload_create

    with django_db_blocker.unblock():
        atomic = transaction.atomic()
        atomic.__enter__()

        def user(name: str, *groups: str, superuser: bool = False) -> User:
            u = User.objects.create(username=name, is_superuser=superuser, is_staff=superuser)
            for g in groups:
                u.groups.add(Group.objects.get(name=g))
            return u

        users = {
            "reader": user("dov"),
            "contributor": user("ada", "contributors"),
            "other contributor": user("bram", "contributors"),
            "curator": user("cleo", "curators"),
            "superuser": user("root-admin", superuser=True),
        }
        tokens = {role: Token.objects.create(user=u).key for role, u in users.items()}
        source = Source.objects.create(slug="tarn-7", name="Tarn 7", ra=150.0, dec=20.0, ebv=0.1)
        Source.objects.create(slug="empty-src", name="Nothing yet", ra=10.0, dec=-5.0)
        Instrument.objects.create(
            slug="hollow-hill-1m",
            name="Hollow Hill 1.0 m",
            kind="ground",
            site_lon=-70.7,
            site_lat=-30.2,
            site_height=2200.0,
            default_time_format="mjd",
            default_time_scale="tdb",
            default_time_reference="BARYCENTER",
        )
        # Bessell, Castelli & Plez 1998, Table A2 (as tests/conftest.py).
        for slug, wl, zp in (("r", 6410.0, 3064.0), ("v", 5450.0, 3636.0)):
            Band.objects.create(
                slug=slug,
                name=slug.upper(),
                kind="flux_density",
                wavelength_eff=wl,
                mag_system="Vega",
                zero_point_jy=zp,
            )
        t = 60000.0 + np.arange(N_PUBLIC, dtype=float)
        ada = users["contributor"]
        common = dict(source="tarn-7", instrument="hollow-hill-1m", value_unit="mJy", **BARY)
        public = upload_create(
            uploader=ada,
            data=_csv(t, 1.0),
            file_name="r-open.csv",
            params=UploadParams(band="r", **common),
        )
        embargoed = upload_create(
            uploader=ada,
            data=_csv(t, 2.0),
            file_name="v-embargoed.csv",
            params=UploadParams(
                band="v", embargo_until=timezone.now() + dt.timedelta(days=365), **common
            ),
        )
        job = Job.objects.create(
            kind="correlation",
            owner=ada,
            source=source,
            parameters={"x": "r", "y": "v"},
            state=JobState.FAILED,
            error="worker lost",
        )
        data = {"tokens": tokens, "P": public.pk, "E": embargoed.pk, "JOB": str(job.pk)}
    yield data
    with django_db_blocker.unblock():
        transaction.set_rollback(True)
        atomic.__exit__(None, None, None)


def _rows(body: Any) -> int:
    return int(body["n_rows"])


def _summary_points(body: Any) -> int:
    item = next(s for s in body.get("results", [body]) if s["slug"] == "tarn-7")
    return sum(b["n_points"] for b in item["summary"])


def _count(body: Any) -> int:
    return int(body["count"])


def _csv_rows(content: bytes) -> int:
    return content.decode().count("\n") - 1


def _variability_n(body: Any) -> int:
    return sum(b["n"] for b in body["bands"])


def _sed_points(body: Any) -> int:
    return sum(r["n"] for r in body["rows"])


def _pairs(body: Any) -> int:
    return int(body["n_pairs"])


@dataclass(frozen=True)
class Endpoint:
    """One row of the matrix: a request and what each role in ROLES must get."""

    name: str
    method: str
    path: str  # {P}: the open upload, {E}: the embargoed one, {JOB}: the contributor's job
    statuses: str  # one status per role, in the order of ROLES
    body: dict[str, Any] | None = None
    file: bytes | None = None  # multipart upload with this file
    measure: Callable[[Any], int] | None = None
    seen: tuple[int | None, ...] | None = None  # what ``measure`` must give per role
    raw: bool = False  # measure the bytes, not the JSON


CURATED = "401 401 403 403 403 {ok} {ok}"
SEEN = (None, PUB, PUB, ALL, PUB, ALL, ALL)  # embargoed data: uploader and curators only
NEW_FILE = _csv(np.array([60100.0, 60101.0]), 5.0)
CORR = "/api/v1/sources/tarn-7/correlation/?x=r&y=v&n_boot=100"

MATRIX = [
    # ---- curated catalogue (API5: function level)
    Endpoint(
        "sources list",
        "GET",
        "/api/v1/sources/",
        "401 200 200 200 200 200 200",
        measure=_summary_points,
        seen=SEEN,
    ),
    Endpoint(
        "source detail",
        "GET",
        "/api/v1/sources/tarn-7/",
        "401 200 200 200 200 200 200",
        measure=_summary_points,
        seen=SEEN,
    ),
    Endpoint(
        "sources POST",
        "POST",
        "/api/v1/sources/",
        CURATED.format(ok=201),
        body={"slug": "new-src", "name": "New", "ra": 1.0, "dec": 2.0},
    ),
    Endpoint(
        "source PATCH",
        "PATCH",
        "/api/v1/sources/tarn-7/",
        CURATED.format(ok=200),
        body={"notes": "re-measured position"},
    ),
    Endpoint(
        "source PUT",
        "PUT",
        "/api/v1/sources/empty-src/",
        CURATED.format(ok=200),
        body={"slug": "empty-src", "name": "Renamed", "ra": 10.0, "dec": -5.0},
    ),
    Endpoint("source DELETE", "DELETE", "/api/v1/sources/empty-src/", CURATED.format(ok=204)),
    Endpoint(
        "instruments POST",
        "POST",
        "/api/v1/instruments/",
        CURATED.format(ok=201),
        body={
            "slug": "new-cam",
            "name": "New camera",
            "kind": "space",
            "default_time_format": "mjd",
            "default_time_scale": "tt",
            "default_time_reference": "GEOCENTER",
        },
    ),
    Endpoint(
        "bands POST",
        "POST",
        "/api/v1/bands/",
        CURATED.format(ok=201),
        body={
            "slug": "b",
            "name": "B",
            "kind": "flux_density",
            "wavelength_eff": 4400.0,
            "mag_system": "Vega",
            "zero_point_jy": 4063.0,
        },
    ),
    Endpoint(
        "calibration-offsets POST",
        "POST",
        "/api/v1/calibration-offsets/",
        CURATED.format(ok=201),
        body={"instrument": "hollow-hill-1m", "band": "r", "factor": 1.05},
    ),
    # ---- uploads (API5 for POST; API1 for someone else's or embargoed records)
    Endpoint(
        "uploads POST",
        "POST",
        "/api/v1/uploads/",
        "401 401 403 201 201 201 201",
        body={
            "source": "tarn-7",
            "band": "r",
            "instrument": "hollow-hill-1m",
            "value_unit": "mJy",
            **BARY,
        },
        file=NEW_FILE,
    ),
    Endpoint(
        "uploads POST superseding the contributor's",
        "POST",
        "/api/v1/uploads/",
        "401 401 403 201 403 201 201",
        body={
            "source": "tarn-7",
            "band": "r",
            "instrument": "hollow-hill-1m",
            "value_unit": "mJy",
            "supersedes": "{P}",
            **BARY,
        },
        file=NEW_FILE,
    ),
    Endpoint(
        "uploads list",
        "GET",
        "/api/v1/uploads/",
        "401 200 200 200 200 200 200",
        measure=_count,
        seen=(None, 1, 1, 2, 1, 2, 2),
    ),
    Endpoint(
        "uploads list ?uploader=ada",
        "GET",
        "/api/v1/uploads/?uploader=ada",
        "401 200 200 200 200 200 200",
        measure=_count,
        seen=(None, 1, 1, 2, 1, 2, 2),
    ),
    Endpoint("upload detail, open", "GET", "/api/v1/uploads/{P}/", "401 200 200 200 200 200 200"),
    Endpoint(
        "upload detail, embargoed", "GET", "/api/v1/uploads/{E}/", "401 404 404 200 404 200 200"
    ),
    Endpoint(
        "upload file, embargoed", "GET", "/api/v1/uploads/{E}/file/", "401 404 404 200 404 200 200"
    ),
    Endpoint(
        "upload retract, open (contributor's)",
        "POST",
        "/api/v1/uploads/{P}/retract/",
        "401 401 403 200 403 200 200",
        body={"reason": "wrong flat field"},
    ),
    Endpoint(
        "upload retract, embargoed (contributor's)",
        "POST",
        "/api/v1/uploads/{E}/retract/",
        "401 401 403 200 404 200 200",
        body={"reason": "wrong flat field"},
    ),
    Endpoint(
        "upload DELETE (nothing is deleted)",
        "DELETE",
        "/api/v1/uploads/{P}/",
        "401 401 403 405 405 405 405",
    ),
    # ---- curves and summaries computed from embargoed points (API1)
    Endpoint(
        "lightcurve",
        "GET",
        "/api/v1/sources/tarn-7/lightcurve/",
        "401 200 200 200 200 200 200",
        measure=_rows,
        seen=SEEN,
    ),
    Endpoint(
        "lightcurve binned 1d",
        "GET",
        "/api/v1/sources/tarn-7/lightcurve/?bin=1d",
        "401 200 200 200 200 200 200",
        measure=_rows,
        seen=SEEN,
    ),
    Endpoint(
        "lightcurve csv",
        "GET",
        "/api/v1/sources/tarn-7/lightcurve/?format=csv",
        "401 200 200 200 200 200 200",
        measure=_csv_rows,
        seen=SEEN,
        raw=True,
    ),
    Endpoint(
        "lightcurve as_of now",
        "GET",
        "/api/v1/sources/tarn-7/lightcurve/?as_of=2100-01-01T00:00:00Z",
        "401 200 200 200 200 200 200",
        measure=_rows,
        seen=SEEN,
    ),
    Endpoint(
        "variability",
        "GET",
        "/api/v1/sources/tarn-7/variability/",
        "401 200 200 200 200 200 200",
        measure=_variability_n,
        seen=SEEN,
    ),
    Endpoint(
        "sed",
        "GET",
        "/api/v1/sources/tarn-7/sed/?at=60010&window=1",
        "401 200 200 200 200 200 200",
        measure=_sed_points,
        seen=(None, 1, 1, 2, 1, 2, 2),
    ),
    Endpoint(
        "correlation r-v",
        "GET",
        CORR,
        "401 200 200 200 200 200 200",
        measure=_pairs,
        seen=(None, 0, 0, N_PUBLIC, 0, N_PUBLIC, N_PUBLIC),
    ),
    Endpoint(
        "lags r-v",
        "GET",
        "/api/v1/sources/tarn-7/lags/?x=r&y=v&lag_step=1&lag_max=5",
        "401 400 400 200 400 200 200",
    ),
    # ---- jobs (API1: someone else's job)
    Endpoint(
        "jobs POST",
        "POST",
        "/api/v1/jobs/",
        "401 401 202 202 202 202 202",
        body={"kind": "correlation", "source": "tarn-7", "parameters": {"x": "r", "y": "v"}},
    ),
    Endpoint(
        "jobs list",
        "GET",
        "/api/v1/jobs/",
        "401 401 200 200 200 200 200",
        measure=_count,
        seen=(None, None, 0, 1, 0, 1, 1),
    ),
    Endpoint(
        "job detail (contributor's)", "GET", "/api/v1/jobs/{JOB}/", "401 401 404 200 404 200 200"
    ),
    Endpoint(
        "job retry (contributor's)",
        "POST",
        "/api/v1/jobs/{JOB}/retry/",
        "401 401 404 202 404 202 202",
    ),
]


def _client(world: dict[str, Any], role: str) -> Any:
    from rest_framework.test import APIClient

    c = APIClient()
    if role in world["tokens"]:
        c.credentials(HTTP_AUTHORIZATION=f"Token {world['tokens'][role]}")
    return c


def _fill(text: str, world: dict[str, Any]) -> str:
    return (
        text.replace("{P}", str(world["P"]))
        .replace("{E}", str(world["E"]))
        .replace("{JOB}", world["JOB"])
    )


def test_matrix_has_one_status_per_role():
    for ep in MATRIX:
        assert len(ep.statuses.split()) == len(ROLES), ep.name
        assert ep.seen is None or len(ep.seen) == len(ROLES), ep.name


def _ask(world: dict[str, Any], ep: Endpoint, role: str) -> tuple[int, int | None]:
    """One request of the row as ``role``: the status and what ``ep.measure`` counts."""
    c = _client(world, role)
    path = _fill(ep.path, world)
    body = {k: _fill(v, world) if isinstance(v, str) else v for k, v in (ep.body or {}).items()}
    if ep.file is not None:
        f = io.BytesIO(ep.file)
        f.name = "new.csv"
        r = c.post(path, {"file": f, **body}, format="multipart")
    elif ep.method == "GET":
        r = c.get(path)
    else:
        r = getattr(c, ep.method.lower())(path, body or None, format="json")
    content = r.content if not getattr(r, "streaming", False) else b"".join(r.streaming_content)
    if r.status_code >= 400:  # refusals are JSON with a message, whoever asks
        assert "json" in r["Content-Type"], (role, ep.name)
        assert json.loads(content)["detail"], (role, ep.name)
    seen = None
    if ep.measure is not None and r.status_code < 300:
        seen = ep.measure(content if ep.raw else json.loads(content))
    return r.status_code, seen


@pytest.mark.parametrize("ep", MATRIX, ids=[ep.name for ep in MATRIX])
def test_role_matrix(world, settings, ep: Endpoint):
    """One row: every role in turn, each in a savepoint (a write by one is not seen by the next)."""
    statuses, seen = [], []
    for role in ROLES:
        settings.LCSTORE_PUBLIC_READ = role == "anonymous, public read"
        with transaction.atomic():
            status, count = _ask(world, ep, role)
            transaction.set_rollback(True)
        statuses.append(str(status))
        seen.append(count)
    assert " ".join(statuses) == ep.statuses, dict(zip(ROLES, statuses, strict=True))
    if ep.seen is not None:
        # compare the counts where the row states one (None: refused, nothing to count)
        got = [None if e is None else n for n, e in zip(seen, ep.seen, strict=True)]
        assert got == list(ep.seen), dict(zip(ROLES, seen, strict=True))


# ---- access bugs found while building the matrix (API1): strict xfail until fixed.
# Each names the fix; drop the mark with it.


def _embargoed_successor(world: dict[str, Any]) -> int:
    """The contributor supersedes the open upload with an embargoed one."""
    from django.contrib.auth.models import User

    from lcstore.services import UploadParams, upload_create

    new = upload_create(
        uploader=User.objects.get(username="ada"),
        data=_csv(np.array([60200.0, 60201.0]), 3.0),
        file_name="r-v2.csv",
        params=UploadParams(
            source="tarn-7",
            band="r",
            instrument="hollow-hill-1m",
            value_unit="mJy",
            supersedes=world["P"],
            embargo_until=timezone.now() + dt.timedelta(days=30),
            **BARY,
        ),
    )
    return new.pk


@pytest.mark.parametrize("role", ["reader", "other contributor"])
def test_superseded_by_does_not_name_an_embargoed_successor(world, role):
    hidden = _embargoed_successor(world)
    c = _client(world, role)
    assert c.get(f"/api/v1/uploads/{hidden}/").status_code == 404
    assert c.get(f"/api/v1/uploads/{world['P']}/").json()["superseded_by"] is None


def test_superseded_by_names_the_successor_to_those_who_see_it(world):
    hidden = _embargoed_successor(world)
    for role in ("contributor", "curator"):
        body = _client(world, role).get(f"/api/v1/uploads/{world['P']}/").json()
        assert body["superseded_by"] == hidden


def test_duplicate_of_an_embargoed_upload_does_not_name_it(world):
    f = io.BytesIO(_csv(60000.0 + np.arange(N_PUBLIC, dtype=float), 2.0))  # the embargoed bytes
    f.name = "copy.csv"
    body = {"source": "tarn-7", "band": "v", "instrument": "hollow-hill-1m", "value_unit": "mJy"}
    r = _client(world, "other contributor").post(
        "/api/v1/uploads/", {"file": f, **body, **BARY}, format="multipart"
    )
    assert r.status_code == 409  # the checksum rule holds for everyone
    assert "existing_upload" not in r.json()
    assert f"upload {world['E']}" not in r.json()["detail"]


def test_supersedes_is_no_oracle_for_embargoed_uploads(world):
    c = _client(world, "other contributor")
    answers = []
    for target in (world["E"], 10**12):
        f = io.BytesIO(NEW_FILE)
        f.name = "n.csv"
        body = {
            "source": "tarn-7",
            "band": "r",
            "instrument": "hollow-hill-1m",
            "value_unit": "mJy",
            "supersedes": target,
            **BARY,
        }
        r = c.post("/api/v1/uploads/", {"file": f, **body}, format="multipart")
        answers.append((r.status_code, r.json()["detail"].replace(str(target), "N")))
    assert answers[0] == answers[1]
