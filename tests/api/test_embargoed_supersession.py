"""An embargoed upload that supersedes an open one (lcstore/queries.py visibility rules).

DESIGN.md §4: points of an upload whose embargo is in the future are seen only by its
uploader and by curators; §3: supersession marks the old upload and keeps it reachable.
The rule that follows for a reader who may not see the successor: the superseded upload
stays visible to them until a successor becomes visible (its embargo passes), so they
never lose the open data to something they cannot see. Uploader, curators and superusers
see the successor at once. ``as_of`` applies the same rule to the store as it was then.

"After the embargo" is a moved clock (``django.utils.timezone.now`` a month ahead): the
rule compares the embargo with the time of the request, nothing else changes.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable
from typing import Any

import pytest
from django.utils import timezone

from lcstore.models import Upload
from lcstore.services import UploadParams, upload_create

pytestmark = pytest.mark.django_db

BARY = dict(time_format="mjd", time_scale="tdb", time_reference="BARYCENTER")
COMMON = dict(source="tarn-7", band="r", instrument="hollow-hill-1m", value_unit="mJy", **BARY)
ROLES = ("anonymous", "reader", "other contributor", "uploader", "curator", "superuser")
EMBARGO_DAYS = 30


def _csv(t0: float, value: float) -> bytes:
    return "".join(
        ["time,value,error\n"] + [f"{t0 + i},{value + 0.1 * i:.2f},0.05\n" for i in range(3)]
    ).encode()


@pytest.fixture
def clients(
    settings, contributor, other_contributor, curator, reader, superuser, client_for
) -> dict[str, Any]:
    settings.LCSTORE_PUBLIC_READ = True  # anonymous reads, never embargoed data (DESIGN §4)
    return {
        "anonymous": client_for(None),
        "reader": client_for(reader),
        "other contributor": client_for(other_contributor),
        "uploader": client_for(contributor),
        "curator": client_for(curator),
        "superuser": client_for(superuser),
    }


def _upload(user: Any, data: bytes, name: str, **params: Any) -> Upload:
    return upload_create(
        uploader=user, data=data, file_name=name, params=UploadParams(**COMMON, **params)
    )


def _embargo() -> dt.datetime:
    return timezone.now() + dt.timedelta(days=EMBARGO_DAYS)


def _seen(clients: dict[str, Any], **query: Any) -> dict[str, set[int]]:
    """Per role, the uploads whose points the light curve of band r shows."""
    out = {}
    for role in ROLES:
        r = clients[role].get("/api/v1/sources/tarn-7/lightcurve/", {"bands": "r", **query})
        assert r.status_code == 200, (role, r.content[:300])
        out[role] = {row["upload"] for row in r.json()["rows"]}
    return out


def _by_role(before: int, after: int) -> dict[str, set[int]]:
    """``before`` for those who may not see the embargoed upload, ``after`` for the others."""
    blind = {"anonymous", "reader", "other contributor"}
    return {role: {before if role in blind else after} for role in ROLES}


def _month_later(monkeypatch: Any) -> None:
    later = timezone.now() + dt.timedelta(days=EMBARGO_DAYS + 1)
    monkeypatch.setattr(timezone, "now", lambda: later)


def test_open_upload_stays_visible_until_its_embargoed_successor_is(
    monkeypatch, catalogue, contributor, clients
):
    old = _upload(contributor, _csv(60000, 1.0), "r-open.csv")
    between = timezone.now()
    new = _upload(
        contributor, _csv(60000, 2.0), "r-v2.csv", supersedes=old.pk, embargo_until=_embargo()
    )
    after_both = timezone.now()
    assert Upload.objects.get(pk=old.pk).status == "superseded"

    # Under embargo: readers keep the open upload, the uploader and curators see the new one.
    assert _seen(clients) == _by_role(old.pk, new.pk)
    assert _seen(clients, as_of=after_both.isoformat()) == _by_role(old.pk, new.pk)
    assert _seen(clients, as_of=between.isoformat()) == {role: {old.pk} for role in ROLES}
    # the per-band counts of the source follow the same rule
    counts = {
        role: clients[role].get("/api/v1/sources/tarn-7/").json()["summary"][0]["n_points"]
        for role in ROLES
    }
    assert counts == {role: 3 for role in ROLES}

    # After the embargo date everyone sees the successor only; the past is unchanged.
    _month_later(monkeypatch)
    assert _seen(clients) == {role: {new.pk} for role in ROLES}
    assert _seen(clients, as_of=after_both.isoformat()) == {role: {new.pk} for role in ROLES}
    assert _seen(clients, as_of=between.isoformat()) == {role: {old.pk} for role in ROLES}


def test_an_open_successor_after_an_embargoed_one_hides_the_first_at_once(
    catalogue, contributor, clients
):
    """A (open) <- B (embargoed) <- C (open): readers see C, never A beside it."""
    a = _upload(contributor, _csv(60000, 1.0), "a.csv")
    b = _upload(contributor, _csv(60000, 2.0), "b.csv", supersedes=a.pk, embargo_until=_embargo())
    between = timezone.now()
    c = _upload(contributor, _csv(60000, 3.0), "c.csv", supersedes=b.pk)

    assert _seen(clients) == {role: {c.pk} for role in ROLES}
    # as the store was before C: readers still had A, the others B
    assert _seen(clients, as_of=between.isoformat()) == _by_role(a.pk, b.pk)


def test_a_chain_of_embargoed_successors_keeps_the_open_one_until_the_last_is_seen(
    monkeypatch, catalogue, contributor, clients
):
    """A (open) <- B (embargoed) <- B2 (embargoed, as a re-derivation makes it)."""
    a = _upload(contributor, _csv(60000, 1.0), "a.csv")
    until = _embargo()
    b = _upload(contributor, _csv(60000, 2.0), "b.csv", supersedes=a.pk, embargo_until=until)
    b2 = _upload(contributor, _csv(60000, 2.5), "b2.csv", supersedes=b.pk, embargo_until=until)

    assert _seen(clients) == _by_role(a.pk, b2.pk)
    _month_later(monkeypatch)
    assert _seen(clients) == {role: {b2.pk} for role in ROLES}


def test_retraction_and_open_supersession_are_unchanged(catalogue, contributor, clients):
    """Without an embargo supersession takes effect for everyone at once (DESIGN §3)."""
    a = _upload(contributor, _csv(60000, 1.0), "a.csv")
    b = _upload(contributor, _csv(60000, 2.0), "b.csv", supersedes=a.pk)
    assert _seen(clients) == {role: {b.pk} for role in ROLES}
    # a retracted upload is hidden from everyone, embargo or not
    from lcstore.services import upload_retract

    upload_retract(upload=b, user=contributor, reason="wrong aperture")
    assert _seen(clients) == {role: set() for role in ROLES}


def test_selector_agrees_with_the_api(catalogue, contributor, reader, curator):
    from lcstore.queries import uploads_visible

    old = _upload(contributor, _csv(60000, 1.0), "r-open.csv")
    new = _upload(
        contributor, _csv(60000, 2.0), "r-v2.csv", supersedes=old.pk, embargo_until=_embargo()
    )
    ids: Callable[[Any], set[int]] = lambda user: set(  # noqa: E731
        uploads_visible(user=user).values_list("pk", flat=True)
    )
    assert (ids(reader), ids(contributor), ids(curator)) == ({old.pk}, {new.pk}, {new.pk})


def test_the_upload_record_reads_as_accepted_while_its_successor_is_hidden(
    monkeypatch, catalogue, contributor, clients
):
    """The record agrees with the points: "superseded" with no successor named would
    tell a reader that an embargoed upload exists (OWASP API Security Top 10 2023,
    API3 Broken Object Property Level Authorization)."""
    old = _upload(contributor, _csv(60000, 1.0), "r-open.csv")
    new = _upload(
        contributor, _csv(60000, 2.0), "r-v2.csv", supersedes=old.pk, embargo_until=_embargo()
    )

    def record(role: str) -> dict[str, Any]:
        r = clients[role].get(f"/api/v1/uploads/{old.pk}/")
        assert r.status_code == 200, (role, r.content[:300])
        return r.json()

    blind = {"anonymous", "reader", "other contributor"}
    for role in ROLES:
        body = record(role)
        if role in blind:
            assert (body["status"], body["superseded_by"], body["superseded_at"]) == (
                "accepted",
                None,
                None,
            ), role
        else:
            assert (body["status"], body["superseded_by"]) == ("superseded", new.pk), role
            assert body["superseded_at"] is not None, role

    _month_later(monkeypatch)
    for role in ROLES:
        body = record(role)
        assert (body["status"], body["superseded_by"]) == ("superseded", new.pk), role


def test_answers_of_a_source_the_embargoed_successor_leaves_out_are_not_cached(
    settings, catalogue, contributor, clients
):
    """A file of two sources is superseded by an embargoed file of one of them: the other
    source's answer now differs by who asks (readers keep the old points, the uploader
    does not), so lcstore.versions must not give it a cache key (an answer built for
    one account served to another is OWASP API1, Broken Object Level Authorization)."""
    from lcstore.models import Source

    settings.LCSTORE_CACHE_ANSWERS = True
    Source.objects.create(slug="tarn-8", name="Tarn 8", ra=151.0, dec=21.0, redshift=0.2)
    both = "".join(
        ["source,time,value,error\n"]
        + [
            f"{s},{60000 + i},{1.0 + 0.1 * i:.2f},0.05\n"
            for s in ("tarn-7", "tarn-8")
            for i in range(3)
        ]
    ).encode()
    params = {k: v for k, v in COMMON.items() if k != "source"}
    old = upload_create(
        uploader=contributor, data=both, file_name="two.csv", params=UploadParams(**params)
    )
    upload_create(
        uploader=contributor,
        data=_csv(60000, 2.0),
        file_name="tarn-7-v2.csv",
        params=UploadParams(**COMMON, supersedes=old.pk, embargo_until=_embargo()),
    )

    def ask(role: str) -> tuple[set[int], str | None]:
        r = clients[role].get("/api/v1/sources/tarn-8/lightcurve/", {"bands": "r"})
        assert r.status_code == 200, (role, r.content[:300])
        return {row["upload"] for row in r.json()["rows"]}, r.get("X-Lcstore-Cache")

    for _ in range(2):  # a second round would be served from the cache if keyed
        assert ask("reader") == ({old.pk}, None)
        assert ask("uploader") == (set(), None)
