"""The PostgreSQL fast paths answer exactly as the numpy path does.

``lcstore.curves.pull_path`` sends fixed-width bins to one SQL GROUP BY
(``sql-bins``) and raw canonical CSV to ``COPY … TO STDOUT`` (``sql-copy``).
Each test asks the same question twice over HTTP, once on the fast path and
once with ``pull_path`` pinned to ``"numpy"`` (the points fetched, every step
on arrays), and compares the answers: bins equal up to rounding (rtol 1e-12;
the sums are added in another order), counts, edges, flags, steps and
provenance equal exactly; raw CSV equal byte for byte.

Outside references, named beside the checks: REFERENCES §4 (the worked
example and the oracle ``astropy.timeseries.aggregate_downsample`` summing
w = 1/σ² and wf = f/σ², Bevington & Robinson eqs. 4.17–4.19), scipy.stats.sem
for the plain mean's standard error, and numpy's shortest round-trip float
text (``repr``) for the CSV numbers.
"""

from __future__ import annotations

import io
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd
import pytest
import scipy.stats
from django.db import connection

import api.views.curves as curve_views
import lcstore.curves as curves
from lcstore.models import CalibrationOffset, Instrument
from tests.science.test_binning import REF_F, REF_S, REF_T, astropy_weighted_bins

pytestmark = pytest.mark.django_db

BASE = dict(
    source="tarn-7",
    value_unit="mJy",
    time_format="mjd",
    time_scale="tdb",
    time_reference="BARYCENTER",
)


@pytest.fixture(autouse=True)
def _no_answer_cache(settings: Any) -> None:
    """Both paths must compute: a cached body would hide one of them."""
    settings.LCSTORE_CACHE_ANSWERS = False


def _csv(rows: list[str], header: str = "time,value,error,upper_limit") -> str:
    return header + "\n" + "\n".join(rows) + "\n"


@pytest.fixture
def store(catalogue, contributor, other_contributor, client_for, upload_file):
    """Two instruments in r (one with an offset), limits, missing errors, a retracted
    and an embargoed upload, and a gamma-ray band of mostly limits."""
    ada = client_for(contributor)
    bram = client_for(other_contributor)
    fern = Instrument.objects.create(
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
    r1 = _csv(
        [
            "60000.1,1.0,0.1,0",
            "60000.2,1.2,0.2,0",
            "60000.3,0.8,0.1,0",
            "60000.35,0.5,,1",  # a limit in a bin with detections: left out
            "60001.1,2.0,0.1,0",
            "60002.2,0.7,,1",  # limits only: the smaller limit, flagged
            "60002.4,0.6,,1",
            "60003.1,3.0,,0",  # a detection without error: plain mean of the bin
            "60003.2,3.5,0.2,0",
            "60003.3,2.5,0.2,0",
            "60004.5,-0.25,,0",  # one detection, no error: NaN error
            "60005.5,4.0,0.5,0",
        ]
    )
    r2 = _csv(
        [
            "60000.6,1.1,0.1,0",
            "60001.6,2.2,0.1,0",
            "60002.5,3.0,0.3,0",  # a detection joins the limits of day 60002
            "60003.7,2.9,0.3,0",
            "60006.2,5.0,0.4,0",
        ]
    )
    for text, name, inst in ((r1, "r1.csv", "hollow-hill-1m"), (r2, "r2.csv", fern.slug)):
        r = upload_file(ada, text, name, band="r", instrument=inst, **BASE)
        assert r.status_code == 201, r.json()
    gone = upload_file(
        ada, _csv(["60000.5,50.0,1.0,0", "60007.5,60.0,1.0,0"]), "gone.csv", band="r",
        instrument="hollow-hill-1m", **BASE,
    )  # fmt: skip
    assert gone.status_code == 201
    r = ada.post(f"/api/v1/uploads/{gone.json()['id']}/retract/", {"reason": "bad"}, format="json")
    assert r.status_code in (200, 201), r.content
    hidden = upload_file(
        bram, _csv(["60001.4,9.0,0.5,0", "60008.5,9.5,0.5,0"]), "hidden.csv", band="r",
        instrument=fern.slug, embargo_until="2999-01-01T00:00:00Z", **BASE,
    )  # fmt: skip
    assert hidden.status_code == 201, hidden.json()
    g = _csv(
        [
            "60000.5,1e-06,1e-07,0",
            "60001.5,2e-06,2e-07,0",
            "60001.7,9e-07,,1",
            "60002.5,5e-07,,1",
            "60002.6,4e-07,,1",
        ]
    )
    r = upload_file(
        ada, g, "g.csv", band="gamma", instrument="wren-lat",
        **{**BASE, "value_unit": "ph/(cm2 s)"},
    )  # fmt: skip
    assert r.status_code == 201, r.json()
    CalibrationOffset.objects.create(instrument=fern, band=catalogue["r"], factor=0.8)
    return {"ada": ada, "bram": bram, "fern": fern}


@pytest.fixture
def both(monkeypatch: pytest.MonkeyPatch) -> Callable[..., tuple[Any, Any]]:
    """GET a URL on the path pull_path picks and again on the numpy path.

    Returns both responses and checks that the fast selector really ran (and
    that the pinned run did not use it).
    """
    calls = {"bins": 0, "copy": 0}
    real_bins, real_copy = curves.bin_partials_for_source, curves.points_csv_copy

    def spy_bins(**kw: Any) -> Any:
        calls["bins"] += 1
        return real_bins(**kw)

    def spy_copy(**kw: Any) -> Any:
        calls["copy"] += 1
        return real_copy(**kw)

    monkeypatch.setattr(curves, "bin_partials_for_source", spy_bins)
    monkeypatch.setattr(curves, "points_csv_copy", spy_copy)

    def get(client: Any, url: str, expect: str) -> tuple[Any, Any]:
        calls.update(bins=0, copy=0)
        fast = client.get(url)
        assert calls == {"bins": int(expect == "bins"), "copy": int(expect == "copy")}
        with monkeypatch.context() as m:
            for module in (curves, curve_views):  # the view asks first, for raw CSV
                m.setattr(module, "pull_path", lambda *a, **k: curves.NUMPY)
            slow = client.get(url)
        assert calls == {"bins": int(expect == "bins"), "copy": int(expect == "copy")}
        return fast, slow

    return get


def _body(r: Any) -> bytes:
    return b"".join(r.streaming_content) if r.streaming else r.content


def _same_bins(fast: dict[str, Any], slow: dict[str, Any]) -> None:
    """Equal answers: exact except value and error (rtol 1e-12, None = NaN)."""
    assert fast["columns"] == slow["columns"] and fast["n_rows"] == slow["n_rows"]
    for key in set(fast) - {"rows"}:
        assert fast[key] == slow[key], key
    for a, b in zip(fast["rows"], slow["rows"], strict=True):
        for col in a:
            if col in ("value", "error") and a[col] is not None and b[col] is not None:
                assert a[col] == pytest.approx(b[col], rel=1e-12, abs=0), (col, a, b)
            else:
                assert a[col] == b[col], (col, a, b)


BINNED_CASES = [
    "bands=r&bin=1d",
    "bin=1d",  # every band with points, by slug
    "bands=r,gamma&bin=1d&upper_limits=exclude",
    "bands=gamma&bin=1d",
    "bands=r&bin=1h&origin=60000.0375",  # the edge-corrected bin index
    "bands=r&bin=2.5&origin=0.3",
    "bands=r&bin=6h&start=60000.2&end=60003.25",
    "bands=r&bin=1d&instruments=fern-0p6",
    "bands=r&bin=1d&unit=ABmag",
    "bands=r,gamma&bin=12h&unit=Jy,nufnu",
    "bands=r&bin=1d&deredden=true",
    "bands=r&bin=1000d",
]


@pytest.mark.parametrize("query", BINNED_CASES)
def test_sql_bins_equal_numpy_bins(store, both, query):
    fast, slow = both(store["ada"], f"/api/v1/sources/tarn-7/lightcurve/?{query}", "bins")
    assert fast.status_code == slow.status_code == 200, fast.content
    _same_bins(fast.json(), slow.json())


@pytest.mark.parametrize("who", ["bram", "curator", "reader"])
def test_sql_bins_follow_the_embargo_and_retraction(store, both, client_for, curator, reader, who):
    """Retracted points count for nobody; embargoed ones for their uploader and curators."""
    client = {"bram": store["bram"], "curator": client_for(curator), "reader": client_for(reader)}
    fast, slow = both(client[who], "/api/v1/sources/tarn-7/lightcurve/?bands=r&bin=1d", "bins")
    body = fast.json()
    _same_bins(body, slow.json())
    days = {row["time_lo"] for row in body["rows"]}
    assert 60007.0 not in days  # the retracted upload's own day
    assert (60008.0 in days) == (who != "reader")  # the embargoed upload's own day


def test_sql_bins_rules_against_outside_references(store, both):
    """The fast path's bins, checked against outside references directly."""
    fast, _ = both(store["ada"], "/api/v1/sources/tarn-7/lightcurve/?bands=r&bin=1d", "bins")
    rows = {row["time_lo"]: row for row in fast.json()["rows"]}
    # Day 60000: r1's three detections and r2's 1.1 x 0.8 (offset), errors scaled alike;
    # REFERENCES §4 oracle, astropy aggregate_downsample of w = 1/σ², wf = f/σ².
    f = np.array([1.0, 1.2, 0.8, 1.1 * 0.8])
    s = np.array([0.1, 0.2, 0.1, 0.1 * 0.8])
    _, mean, err = astropy_weighted_bins(60000 + np.array([0.1, 0.2, 0.3, 0.6]), f, s, width_days=1)
    assert rows[60000.0]["value"] == pytest.approx(mean[0], rel=1e-12)
    assert rows[60000.0]["error"] == pytest.approx(err[0], rel=1e-12)
    assert rows[60000.0]["n"] == 4 and rows[60000.0]["upper_limit"] is False
    # Day 60002: r2's detection 3.0 x 0.8 wins over r1's two limits (DESIGN binning rules).
    assert rows[60002.0]["value"] == pytest.approx(2.4) and rows[60002.0]["n"] == 1
    # Day 60003: one detection lacks an error: plain mean and scipy.stats.sem.
    x = np.array([3.0, 3.5, 2.5, 2.9 * 0.8])
    assert rows[60003.0]["value"] == pytest.approx(x.mean(), rel=1e-12)
    assert rows[60003.0]["error"] == pytest.approx(scipy.stats.sem(x), rel=1e-12)
    # Day 60004: one detection without error: its value, no error.
    assert rows[60004.0]["value"] == -0.25 and rows[60004.0]["error"] is None
    gamma = store["ada"].get("/api/v1/sources/tarn-7/lightcurve/?bands=gamma&bin=1d").json()
    last = gamma["rows"][-1]  # limits only: the most constraining limit, flagged, n limits
    assert last["upper_limit"] is True and last["value"] == 4e-7 and last["n"] == 2


def test_sql_bins_reference_example_and_many_bins(
    catalogue, contributor, client_for, upload_file, both
):
    """REFERENCES §4 worked example, then a seeded random curve against the astropy oracle."""
    c = client_for(contributor)

    def table(*cols: np.ndarray) -> str:
        return _csv([",".join(repr(float(x)) for x in row) for row in zip(*cols, strict=True)],
                    "time,value,error")  # fmt: skip

    r = upload_file(c, table(REF_T, REF_F, REF_S), "ref.csv", band="r", instrument="hollow-hill-1m", **BASE)  # fmt: skip
    assert r.status_code == 201, r.json()
    fast, slow = both(c, "/api/v1/sources/tarn-7/lightcurve/?bands=r&bin=1d", "bins")
    rows = fast.json()["rows"]
    # REFERENCES §4: [0.93333, 2.1, 3.0] ± [0.066667, 0.070711, 0.3]
    assert [x["value"] for x in rows] == pytest.approx([0.933333, 2.1, 3.0], rel=1e-5)
    assert [x["error"] for x in rows] == pytest.approx([0.0666667, 0.0707107, 0.3], rel=1e-5)
    _same_bins(fast.json(), slow.json())

    rng = np.random.default_rng(42)
    t = np.sort(60100.0 + rng.uniform(0.0, 40.0, 4000))
    f = rng.lognormal(0.0, 0.5, t.size) * 1e-3
    s = f * rng.uniform(0.02, 0.2, t.size)
    r = upload_file(c, table(t, f, s), "many.csv", band="v", instrument="hollow-hill-1m", **BASE)
    assert r.status_code == 201, r.json()
    url = "/api/v1/sources/tarn-7/lightcurve/?bands=v&bin=3h&origin=60100.01"
    fast, slow = both(c, url, "bins")
    _same_bins(fast.json(), slow.json())
    rows = fast.json()["rows"]
    start, mean, err = astropy_weighted_bins(t, f, s, width_days=0.125, origin=60100.01)
    assert [x["time_lo"] for x in rows] == pytest.approx(list(start), abs=1e-9)
    assert [x["value"] for x in rows] == pytest.approx(list(mean), rel=1e-10)
    assert [x["error"] for x in rows] == pytest.approx(list(err), rel=1e-10)


def test_sql_bins_refuse_too_many_bins_as_numpy_does(store, both, settings):
    settings.LCSTORE_MAX_BINS = 5
    fast, slow = both(store["ada"], "/api/v1/sources/tarn-7/lightcurve/?bands=r&bin=1d", "bins")
    assert fast.status_code == slow.status_code == 400
    assert fast.json() == slow.json()


def test_paths_are_chosen_in_one_place():
    """pull_path: the fast paths only where they answer as the numpy path does."""
    import datetime as dt

    req = curves.CurveRequest
    assert connection.vendor == "postgresql"
    assert curves.pull_path(req(bin="1d")) == curves.SQL_BINS
    assert curves.pull_path(req(bin="1d", units=["mag"], deredden=True)) == curves.SQL_BINS
    assert curves.pull_path(req(bin="blocks")) == curves.NUMPY
    assert curves.pull_path(req(bin="1d", host=True)) == curves.NUMPY
    as_of = dt.datetime(2030, 1, 1, tzinfo=dt.UTC)
    assert curves.pull_path(req(bin="1d", as_of=as_of)) == curves.NUMPY
    assert curves.pull_path(req(), fmt="csv") == curves.SQL_COPY
    assert curves.pull_path(req(), fmt="json") == curves.NUMPY
    assert curves.pull_path(req(), fmt="csv", time_format="jd") == curves.NUMPY
    assert curves.pull_path(req(units=["mJy"]), fmt="csv") == curves.NUMPY
    assert curves.pull_path(req(deredden=True), fmt="csv") == curves.NUMPY
    assert curves.pull_path(req(as_of=as_of), fmt="csv") == curves.NUMPY


RAW_CASES = [
    "bands=r",
    "",  # every band with points, by slug
    "bands=gamma,r",
    "bands=r&upper_limits=exclude",
    "bands=r&instruments=fern-0p6,hollow-hill-1m&start=60001.1&end=60004.5",
    "bands=r,r",
    "bands=r&start=70000",  # no points: the header alone
]


@pytest.mark.parametrize("query", RAW_CASES)
def test_sql_copy_csv_equals_the_renderer_byte_for_byte(store, both, query):
    url = f"/api/v1/sources/tarn-7/lightcurve/?format=csv&{query}"
    fast, slow = both(store["ada"], url, "copy")
    assert fast.status_code == slow.status_code == 200
    assert fast.streaming and fast["Content-Type"] == slow["Content-Type"]
    assert fast["Content-Disposition"] == slow["Content-Disposition"]
    body = _body(fast)
    assert body == _body(slow)
    assert body.splitlines()[0] == b"band,time,value,error,upper_limit,instrument,upload"


def test_sql_copy_numbers_read_back_exactly(store, both):
    """Offsets apply as one float multiplication; every number reads back to its float64."""
    fast, _ = both(store["ada"], "/api/v1/sources/tarn-7/lightcurve/?format=csv", "copy")
    body = _body(fast)  # a stream: read once
    table = pd.read_csv(io.BytesIO(body))
    fern = table[table["instrument"] == "fern-0p6"]
    assert list(fern["value"]) == [1.1 * 0.8, 2.2 * 0.8, 3.0 * 0.8, 2.9 * 0.8, 5.0 * 0.8]
    text = body.decode()
    assert "\nr,60000.1,1.0,0.1,false,hollow-hill-1m," in text  # numpy's repr: 1.0, not 1
    assert "\ngamma,60000.5,1e-06,1e-07,false,wren-lat," in text
    assert ",-0.25,,false," in text  # no error: an empty cell
    assert "9.0" not in text  # embargoed for ada
    assert "50.0" not in text  # retracted


def test_sql_copy_embargo_for_its_uploader_only(store, both, client_for, reader):
    bram = _body(both(store["bram"], "/api/v1/sources/tarn-7/lightcurve/?format=csv", "copy")[0])
    other = _body(both(client_for(reader), "/api/v1/sources/tarn-7/lightcurve/?format=csv", "copy")[0])  # fmt: skip
    assert b",9.0,0.5,false,fern-0p6," not in bram  # the offset applies: 9.0 x 0.8
    assert b",7.2,0.4,false,fern-0p6," in bram and b",7.2," not in other


def test_float_text_matches_numpy_repr(db):
    """PostgreSQL's float8 text, as the COPY path writes it, against numpy's repr (the
    renderer's text): equal below 1e15, and exact (the same float64) everywhere."""
    from api.renderers import _format_column
    from lcstore.queries import _float_text_sql

    rng = np.random.default_rng(3)
    values = np.concatenate(
        [
            rng.normal(size=3000) * 10.0 ** rng.integers(-30, 30, 3000),
            58000.0 + rng.random(3000) * 3000.0,
            rng.integers(-(10**6), 10**6, 500).astype(float),
            [0.0, -0.0, 1.0, 1e-4, 9.999e-5, 1e-5, 1e14, 999999999999999.9, 5e-324, 0.1 + 0.2],
            [1e15, 1.5e16, 2.0**60, 1.7976931348623157e308, np.inf, -np.inf, np.nan],
        ]
    )
    with connection.cursor() as cursor:
        cursor.execute("SET extra_float_digits = 1")
        cursor.execute(
            f"SELECT {_float_text_sql('x')} FROM unnest(%s::float8[]) WITH ORDINALITY AS u(x, i) "
            "ORDER BY i",
            [[repr(float(v)) if np.isfinite(v) else str(v) for v in values]],
        )
        ours = [r[0] or "" for r in cursor.fetchall()]
    theirs = _format_column(values).tolist()
    small = np.abs(values) < 1e15
    assert [a for a, s in zip(ours, small, strict=True) if s] == [
        b for b, s in zip(theirs, small, strict=True) if s
    ]
    finite = np.isfinite(values)
    assert all(float(a) == v for a, v, ok in zip(ours, values, finite, strict=True) if ok)
    assert [a for a, ok in zip(ours, finite, strict=True) if not ok] == ["", "", ""]


@pytest.mark.parametrize("bad", [-0.2, float("inf"), float("nan"), 0.0])
def test_sql_bins_treat_unusable_stored_errors_as_numpy_does(store, both, bad):
    """Errors that ingest refuses (≤ 0, infinite) or stores as NULL (NaN), written into the
    table directly: the bin falls back to the plain mean, on both paths (binning rules)."""
    from lcstore.models import FluxPoint

    model = FluxPoint.objects.filter(band__slug="r", t=60001.1).get()
    for t, value, error in ((60010.2, 2.0, 0.1), (60010.4, 3.0, bad), (60011.5, 4.0, 0.2)):
        FluxPoint.objects.create(
            source_id=model.source_id,
            band_id=model.band_id,
            instrument_id=model.instrument_id,
            upload_id=model.upload_id,
            t=t,
            value=value,
            error=error,
            time_orig=t,
            value_orig=value,
            error_orig=error,
        )
    fast, slow = both(store["ada"], "/api/v1/sources/tarn-7/lightcurve/?bands=r&bin=1d", "bins")
    assert fast.status_code == slow.status_code == 200
    _same_bins(fast.json(), slow.json())
    rows = {row["time_lo"]: row for row in fast.json()["rows"]}
    # plain mean of 2 and 3, error scipy.stats.sem; the next day stays weighted
    assert rows[60010.0]["value"] == pytest.approx(2.5)
    assert rows[60010.0]["error"] == pytest.approx(scipy.stats.sem([2.0, 3.0]))
    assert rows[60011.0]["value"] == 4.0 and rows[60011.0]["error"] == pytest.approx(0.2)


@pytest.mark.parametrize(
    "query", ["bands=r&bin=1d", "bin=1d", "bands=r&bin=1d&instruments=fern-0p6"]
)
def test_sql_bins_with_a_band_id_past_the_packed_key(store, both, query):
    """Band ids of 2^20 and more cannot share an int8 key with the upload id: a query that
    may meet one (no band named: every band of the source) groups by three keys instead;
    one naming only small ids keeps the packed key. Both answer as numpy does (and as
    before the band existed)."""
    from lcstore.models import Band

    url = f"/api/v1/sources/tarn-7/lightcurve/?{query}"
    packed, _ = both(store["ada"], url, "bins")
    Band.objects.create(slug="far-id", name="Far id", kind="flux_density", pk=2**20 + 5)
    fast, slow = both(store["ada"], url, "bins")
    assert fast.status_code == slow.status_code == packed.status_code == 200, fast.content
    _same_bins(fast.json(), slow.json())
    _same_bins(fast.json(), packed.json())
