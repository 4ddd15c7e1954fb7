"""The ``columns`` mapping of an upload (DESIGN.md §4): one column per role, one role per column.

A mapping that gives one column two roles (time and value both from ``mjd``), or two
columns to one role (``{"value": "flux", "value": "mag"}``: JSON keeps only the last of
duplicate names, RFC 8259 §4 leaves their meaning undefined), is refused with a 400
naming the column and the roles, and nothing is stored.
"""

from __future__ import annotations

import json
from typing import Any

import pytest

from lcstore.models import FluxPoint, StoredFile, Upload

pytestmark = pytest.mark.django_db

FIELDS = dict(
    source="tarn-7", band="r", instrument="hollow-hill-1m", value_unit="mJy", time_format="mjd"
)
FILE = "mjd,flux,mag,err\n60000,1.5,14.2,0.1\n60001,1.6,14.1,0.1\n"


def _nothing_stored() -> bool:
    return (Upload.objects.count(), FluxPoint.objects.count(), StoredFile.objects.count()) == (
        0,
        0,
        0,
    )


def _errors(r: Any) -> list[dict[str, Any]]:
    assert r.status_code == 400, r.content[:300]
    return r.json()["errors"]


@pytest.mark.parametrize(
    ("mapping", "column", "roles"),
    [
        ({"time": "mjd", "value": "mjd"}, "mjd", ("time", "value")),
        ({"time": "mjd", "value": "flux", "error": "flux"}, "flux", ("error", "value")),
        # names match a file's column without regard to case, so these are one column too
        ({"time": "MJD", "value": "flux", "time_error": "mjd"}, "mjd", ("time", "time_error")),
    ],
)
def test_one_column_for_two_roles_is_refused(
    catalogue, contributor, client_for, upload_file, mapping, column, roles
):
    r = upload_file(client_for(contributor), FILE, "m.csv", columns=json.dumps(mapping), **FIELDS)
    errors = _errors(r)
    assert [e["column"] for e in errors] == [column]
    assert errors[0]["row"] is None
    message = errors[0]["message"]
    assert f"column {column!r}" in message
    assert f"{roles[0]} and {roles[1]}" in message
    assert _nothing_stored()


def test_a_column_named_by_the_mapping_is_not_also_taken_by_its_name(
    catalogue, contributor, client_for, upload_file
):
    """Mapping ``error`` to the column called ``value`` leaves no column for the value role
    except that same one: refused rather than read twice."""
    text = "time,value\n60000,1.5\n60001,1.6\n"
    r = upload_file(
        client_for(contributor), text, "v.csv", columns=json.dumps({"error": "value"}), **FIELDS
    )
    errors = _errors(r)
    assert [e["column"] for e in errors] == ["value"]
    assert "column 'value'" in errors[0]["message"]
    assert "error and value" in errors[0]["message"]
    assert _nothing_stored()


def test_two_columns_for_one_role_is_refused(catalogue, contributor, client_for, upload_file):
    r = upload_file(
        client_for(contributor),
        FILE,
        "m.csv",
        columns='{"time": "mjd", "value": "flux", "value": "mag"}',
        **FIELDS,
    )
    assert r.status_code == 400, r.json()
    text = json.dumps(r.json())
    assert "role 'value'" in text and "'flux' and 'mag'" in text
    assert _nothing_stored()


def test_columns_mapping_field_refuses_two_columns_for_one_role():
    """The serializer field the upload form's input uses (api/serializers.py)."""
    from rest_framework import serializers

    from api.serializers import ColumnsMappingField

    field = ColumnsMappingField(required=False, allow_blank=True)
    with pytest.raises(serializers.ValidationError) as info:
        field.run_validation('{"time": "mjd", "value": "flux", "value": "mag"}')
    assert "role 'value' is given two columns ('flux' and 'mag')" in str(info.value.detail)
    assert field.run_validation('{"time": "mjd", "value": "flux"}') == {
        "time": "mjd",
        "value": "flux",
    }
    assert field.run_validation("") is None
    for bad, says in (
        ("[1]", "must be a JSON object"),
        ('{"time": 3}', "must be a JSON object"),
        ("{", "not valid JSON"),
        ("[" * 100000, "not valid JSON"),
    ):
        with pytest.raises(serializers.ValidationError, match=None) as info:
            field.run_validation(bad)
        assert says in str(info.value.detail)


def test_good_mapping_still_accepted(catalogue, contributor, client_for, upload_file):
    mapping = {"time": "mjd", "value": "flux", "error": "err"}
    r = upload_file(client_for(contributor), FILE, "ok.csv", columns=json.dumps(mapping), **FIELDS)
    assert r.status_code == 201, r.json()
    assert r.json()["columns"] == mapping
