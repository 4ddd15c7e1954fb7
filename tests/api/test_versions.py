"""Cache-key versions in one query, role lookups once per user object, planner statistics."""

from __future__ import annotations

import pytest
from django.db import connection

from lcstore import roles
from lcstore.models import CalibrationOffset
from lcstore.versions import answer_version, catalogue_version, source_data_version

pytestmark = pytest.mark.django_db

R = "time,value,error\n60000.1,1.0,0.1\n60000.2,1.2,0.2\n"
BASE = dict(
    source="tarn-7",
    band="r",
    instrument="hollow-hill-1m",
    value_unit="mJy",
    time_format="mjd",
    time_scale="tdb",
    time_reference="BARYCENTER",
)


def test_answer_version_is_one_query_and_moves_with_data_and_catalogue(
    catalogue, contributor, client_for, upload_file, django_assert_num_queries
):
    src = catalogue["source"]
    with django_assert_num_queries(1):
        first = answer_version(src)
    assert first == f"{source_data_version(src)}|{catalogue_version()}"
    c = client_for(contributor)
    up = upload_file(c, R, "r.csv", **BASE)
    assert up.status_code == 201
    after_upload = answer_version(src)
    assert after_upload != first
    CalibrationOffset.objects.create(
        instrument=catalogue["ground"], band=catalogue["r"], factor=1.1
    )
    after_offset = answer_version(src)
    assert after_offset not in (first, after_upload)
    assert after_offset.split("|")[0] == after_upload.split("|")[0]  # data unchanged
    c.post(f"/api/v1/uploads/{up.json()['id']}/retract/", {"reason": "t"}, format="json")
    assert answer_version(src) != after_offset
    upload_file(c, R.replace("60000", "60001"), "e.csv", embargo_until="2999-01-01T00:00Z", **BASE)
    assert answer_version(src) is None  # under embargo: never cached


def test_a_curated_change_is_a_new_cache_key(catalogue, contributor, client_for, upload_file):
    c = client_for(contributor)
    assert upload_file(c, R, "r.csv", **BASE).status_code == 201
    url = "/api/v1/sources/tarn-7/lightcurve/?bands=r&bin=1d&format=csv"
    assert c.get(url)["X-Lcstore-Cache"] == "miss"
    assert c.get(url)["X-Lcstore-Cache"] == "hit"
    CalibrationOffset.objects.create(
        instrument=catalogue["ground"], band=catalogue["r"], factor=2.0
    )
    r = c.get(url)
    assert r["X-Lcstore-Cache"] == "miss"
    # the weighted mean of 1.0 ± 0.1 and 1.2 ± 0.2 is 1.04 (Bevington & Robinson eq. 4.17), × 2
    assert float(r.content.decode().splitlines()[1].split(",")[4]) == pytest.approx(2.08)


def test_roles_read_once_per_user_object(
    make_user, curator, contributor, django_assert_num_queries
):
    from django.contrib.auth.models import Group

    with django_assert_num_queries(1):
        assert roles.is_curator(curator) and roles.is_contributor(curator)
        assert roles.is_curator(curator)
    with django_assert_num_queries(1):
        assert roles.is_contributor(contributor) and not roles.is_curator(contributor)
    contributor.groups.add(Group.objects.get(name=roles.CURATORS))
    assert not roles.is_curator(contributor)  # remembered for this object
    roles.forget(contributor)
    assert roles.is_curator(contributor)
    root = make_user("root-2", superuser=True)
    with django_assert_num_queries(0):
        assert roles.is_curator(root) and roles.is_contributor(root)


def test_point_table_has_the_source_upload_dependency_statistics(db):
    """Migration 0004: CREATE STATISTICS (dependencies) on (source_id, upload_id)."""
    with connection.cursor() as cursor:
        cursor.execute(
            "SELECT stxkind, array(SELECT attname FROM pg_attribute a "
            "WHERE a.attrelid = s.stxrelid AND a.attnum = ANY(s.stxkeys) ORDER BY attname) "
            "FROM pg_statistic_ext s WHERE stxname = 'point_source_upload_stats' "
            "AND stxrelid = 'lcstore_fluxpoint'::regclass"
        )
        rows = cursor.fetchall()
    assert len(rows) == 1
    kinds, columns = rows[0]
    assert "f" in kinds and "d" in kinds  # functional dependencies and ndistinct
    assert columns == ["source_id", "upload_id"]
