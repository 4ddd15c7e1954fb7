"""The bulk loader guards the point table's references itself (issue 6).

The point table's keys to source, band, instrument and upload carry no
database constraint (DEVELOPERS.md, "Point table integrity"); these tests show
what stands in for it: the loader refuses ids that do not exist and nothing is
stored, the ORM's PROTECT still refuses deletes, and the loaded rows read back
exactly. Real PostgreSQL, no mocks: the points go through the same service
steps as an upload (read, prepare, store).
"""

from __future__ import annotations

import hashlib
from typing import Any

import numpy as np
import pytest
from django.db import connection, transaction
from django.db.models import ProtectedError

from lcstore.ingest.load import references_check
from lcstore.ingest.pipeline import UploadInvalid
from lcstore.models import Band, FluxPoint, StoredFile, Upload
from lcstore.services import UploadParams, upload_prepare, upload_read, upload_store

CSV = "time,value,error\n" + "\n".join(
    f"{60000 + i * 0.25:.2f},{1.0 + 0.01 * i:.2f},0.1" for i in range(40)
)
PARAMS = UploadParams(
    instrument="hollow-hill-1m",
    source="tarn-7",
    band="r",
    value_unit="mJy",
    time_format="mjd",
    time_scale="tdb",
    time_reference="BARYCENTER",
)


def _store(uploader: Any, *, corrupt: str | None = None) -> Upload:
    """The service's read/prepare/store steps; ``corrupt`` points one id at a missing row."""
    data = CSV.encode()
    raw = upload_read(data=data, file_name="points.csv", format=None)
    instrument, prepared = upload_prepare(raw=raw, params=PARAMS)
    if corrupt == "band":
        prepared.band_id[5:] = Band.objects.order_by("-pk").first().pk + 1000
    elif corrupt == "source":
        prepared.source_id[:] = prepared.source_id + 1000
    with transaction.atomic():
        return upload_store(
            uploader=uploader,
            data=data,
            sha256=hashlib.sha256(data).hexdigest(),
            file_name="points.csv",
            raw=raw,
            instrument=instrument,
            prepared=prepared,
            params=PARAMS,
            supersedes=None,
        )


@pytest.mark.django_db
def test_point_table_has_no_database_foreign_keys() -> None:
    # The design choice itself, read from PostgreSQL's catalogue (pg_constraint).
    with connection.cursor() as cursor:
        cursor.execute(
            "SELECT count(*) FROM pg_constraint WHERE conrelid = %s::regclass AND contype = 'f'",
            [FluxPoint._meta.db_table],
        )
        assert cursor.fetchone()[0] == 0


@pytest.mark.django_db
@pytest.mark.parametrize("corrupt", ["band", "source"])
def test_missing_reference_is_refused_and_nothing_is_stored(
    catalogue: dict, contributor: Any, corrupt: str
) -> None:
    with pytest.raises(UploadInvalid) as info:
        _store(contributor, corrupt=corrupt)
    problems = info.value.problems
    assert [p.column for p in problems] == [corrupt]
    assert "does not exist" in problems[0].message and "no point was stored" in problems[0].message
    # The whole transaction is gone: no points, no upload record, no kept file.
    assert FluxPoint.objects.count() == 0
    assert Upload.objects.count() == 0
    assert StoredFile.objects.count() == 0


@pytest.mark.django_db
def test_references_check_names_each_missing_table(catalogue: dict, contributor: Any) -> None:
    src, band, inst = catalogue["source"], catalogue["r"], catalogue["ground"]
    with pytest.raises(UploadInvalid) as info:
        references_check(
            source_ids=[src.pk, src.pk],
            band_ids=[band.pk, band.pk + 900, band.pk + 901],
            instrument_id=inst.pk + 500,
            upload_id=10**9,
        )
    by_column = {p.column: p.message for p in info.value.problems}
    assert set(by_column) == {"band", "instrument", "upload"}
    assert f"{band.pk + 900}, {band.pk + 901}" in by_column["band"]
    # All present: no error.
    upload = _store(contributor)
    references_check(
        source_ids=[src.pk], band_ids=[band.pk], instrument_id=inst.pk, upload_id=upload.pk
    )


@pytest.mark.django_db
def test_loaded_points_read_back_and_protect_their_references(
    catalogue: dict, contributor: Any
) -> None:
    upload = _store(contributor)
    rows = FluxPoint.objects.filter(upload=upload).order_by("t")
    t = np.array([p.t for p in rows])
    value = np.array([p.value for p in rows])
    # Barycentric TDB input: stored as given (1 mJy canonical unit).
    np.testing.assert_allclose(t, 60000 + 0.25 * np.arange(40), rtol=0, atol=1e-9)
    np.testing.assert_allclose(value, 1.0 + 0.01 * np.arange(40), rtol=0, atol=1e-12)
    assert {p.band_id for p in rows} == {catalogue["r"].pk}
    # No database constraint, but on_delete=PROTECT still holds in the ORM.
    with pytest.raises(ProtectedError) as info:
        catalogue["r"].delete()
    assert any(isinstance(o, FluxPoint) for o in info.value.protected_objects)
    assert Band.objects.filter(pk=catalogue["r"].pk).exists()


@pytest.mark.django_db
def test_a_stored_file_keeps_its_exact_bytes():
    """The file goes to PostgreSQL as a binary parameter (lcstore.ingest.load.stored_file_save):
    every byte value, NUL and high bytes included, reads back unchanged, and the SHA-256
    of what is stored is the key (FIPS 180-4, hashlib)."""
    data = (CSV + "\n# " + bytes(range(256)).decode("latin-1") + "\n").encode("latin-1")
    from django.utils import timezone

    from lcstore.ingest.load import stored_file_save

    sha = hashlib.sha256(data).hexdigest()
    with transaction.atomic():
        stored_file_save(sha256=sha, data=data, now=timezone.now())
    f = StoredFile.objects.get(pk=sha)
    assert bytes(f.content) == data and f.size == len(data)
    assert hashlib.sha256(bytes(f.content)).hexdigest() == sha
    if connection.vendor == "postgresql":
        with connection.cursor() as cur:
            cur.execute("SELECT enumvals FROM pg_settings WHERE name = 'default_toast_compression'")
            lz4 = "lz4" in cur.fetchone()[0]
            cur.execute(
                "SELECT attcompression FROM pg_attribute WHERE attrelid = "
                "'lcstore_storedfile'::regclass AND attname = 'content'"
            )
            assert cur.fetchone()[0] == ("l" if lz4 else "")
