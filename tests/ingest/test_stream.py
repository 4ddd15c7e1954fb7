"""An upload is parsed, converted and loaded in pieces (lcstore/services.py ``upload_create``).

The pieces must give the same store as one piece: the same points, counts and
provenance, and for a bad file the same error, with nothing stored. The pieces
are made small here (``STREAM_ROWS``, ``chunk_rows``) so that a file of a few
hundred rows crosses several, and runs past the 400-line head that fixes the
delimiter, decimal mark and header.

Anchors:
- times given as MJD in TDB at the solar-system barycentre are BJD_TDB already,
  so they are stored as given (BJD_TDB = JD_TDB at the barycentre; Eastman,
  Siverd & Gaudi 2010, PASP 122, 935); values given in mJy are stored in mJy (the
  canonical unit, DESIGN.md), so each stored point equals its file row exactly;
- the stored file is a zlib stream (RFC 1950) whose inflated bytes have the
  upload's SHA-256 (FIPS 180-4; Python's zlib and hashlib).
"""

from __future__ import annotations

import hashlib
import io
import zlib
from typing import Any

import numpy as np
import pandas as pd
import pytest

from lcstore.ingest.readers import read_upload, read_upload_chunks
from lcstore.models import FluxPoint, Source, StoredFile, Upload
from lcstore.services import UploadInvalid, UploadParams, upload_create

PARAMS = UploadParams(
    instrument="hollow-hill-1m",
    value_unit="mJy",
    time_format="mjd",
    time_scale="tdb",
    time_reference="BARYCENTER",
)


def _rows(n: int = 30) -> pd.DataFrame:
    """``n`` invented rows over two sources and two bands, some limits, some without errors."""
    rng = np.random.default_rng(6)
    return pd.DataFrame(
        {
            "time": np.round(60000 + rng.uniform(0, 50, n), 6),
            "flux": np.round(rng.uniform(1, 5, n), 4),
            "err": np.where(np.arange(n) % 7 == 3, np.nan, 0.05),
            "limit": np.arange(n) % 9 == 4,
            "source": np.where(np.arange(n) % 3 == 0, "tarn-7", "brook-2"),
            "band": np.where(np.arange(n) % 2 == 0, "r", "v"),
        }
    )


def _csv(df: pd.DataFrame) -> bytes:
    buf = io.StringIO()
    buf.write("# invented test night, two sources and two bands\n")
    df.to_csv(buf, index=False, na_rep="", lineterminator="\n")
    return buf.getvalue().encode()


@pytest.fixture
def two_sources(catalogue: dict[str, Any]) -> dict[str, Any]:
    Source.objects.create(slug="brook-2", name="Brook 2", ra=210.0, dec=-40.0)
    return catalogue


def _columns() -> dict[str, str]:
    return {
        "time": "time",
        "value": "flux",
        "error": "err",
        "upper_limit": "limit",
        "source": "source",
        "band": "band",
    }


@pytest.mark.parametrize(
    "text",
    [
        # comments and blank lines among the data, a header
        "t,v\n1,2.5\n# note\n2,3.5\n\n3,4.5\n4,5.5\n5,6.5\n6,7.5\n7,8.5\n",
        # blanks as the delimiter, no header, names from the comment above the data
        "# t v\n1 2.5\n2 3.5\n3 4.5\n4 5.5\n5 6.5\n6 7.5\n7 8.5\n",
        # semicolons with decimal commas
        "t;v\n1;2,5\n2;3,5\n3;4,5\n4;5,5\n5;6,5\n6;7,5\n7;8,5\n",
    ],
)
def test_the_pieces_of_a_text_file_are_the_whole_file_read_at_once(text: str) -> None:
    data = text.encode()
    whole = read_upload(data, filename="f.csv")
    pieces = list(read_upload_chunks(data, filename="f.csv", chunk_rows=3))
    assert [len(p) for p in pieces] == [3, 3, 1]
    joined = pd.concat([p.columns for p in pieces], ignore_index=True)
    pd.testing.assert_frame_equal(joined, whole.columns)
    np.testing.assert_array_equal(
        np.concatenate([p.row_numbers for p in pieces]), whole.row_numbers
    )
    assert all(p.meta == whole.meta and p.units == whole.units for p in pieces)


def _long_text(n: int = 1200) -> str:
    """A text file longer than the head that decides delimiter and header (400+ lines)."""
    lines = ["# invented night log", "t;v;note"]
    for i in range(n):
        lines.append(f"{60000 + i};{i % 17},{i % 10};  n{i % 3}")
        if i % 250 == 7:
            lines.append("# a comment further down")
        if i % 333 == 5:
            lines.append("")
    return "\n".join(lines)  # no newline after the last line


def test_the_pieces_after_the_head_are_the_whole_file_read_at_once() -> None:
    data = _long_text().encode("utf-8-sig")
    whole = read_upload(data, filename="f.csv")
    pieces = list(read_upload_chunks(data, filename="f.csv", chunk_rows=50))
    assert len(pieces) > 10 and sum(len(p) for p in pieces) == len(whole) == 1200
    joined = pd.concat([p.columns for p in pieces], ignore_index=True)
    pd.testing.assert_frame_equal(joined, whole.columns)
    np.testing.assert_array_equal(
        np.concatenate([p.row_numbers for p in pieces]), whole.row_numbers
    )
    assert whole.meta["decimal"] == "," and whole.meta["encoding"] == "utf-8-sig"
    assert all(p.meta["encoding"] == "utf-8-sig" for p in pieces)


@pytest.mark.parametrize(
    "damage",
    [
        lambda lines: lines.insert(900, "61009;1,5"),  # a field short
        lambda lines: lines.insert(901, '61009;1,5;"open'),  # a quote left open
    ],
)
def test_a_bad_line_after_the_head_stops_the_pieces(damage: Any) -> None:
    from lcstore.ingest.readers import ReadError

    lines = _long_text().split("\n")
    damage(lines)
    data = "\n".join(lines).encode()
    with pytest.raises(ReadError):
        read_upload(data, filename="f.csv")  # the reference answer names the line
    with pytest.raises(ReadError):
        list(read_upload_chunks(data, filename="f.csv", chunk_rows=50))


def test_text_past_the_head_that_is_not_utf8_stops_the_pieces() -> None:
    """The head is decoded alone; a later piece that is not plain UTF-8 sends the caller
    to the whole-file reader, which decodes every line with one fallback (cp1252 here:
    0xE9 is "é" in Windows-1252, Python's codec table)."""
    from lcstore.ingest.readers import ReadError

    lines = _long_text().split("\n")
    lines.insert(900, "# observer's note: caf\u00e9")
    data = "\n".join(lines).encode("cp1252")
    with pytest.raises(ReadError):
        list(read_upload_chunks(data, filename="f.csv", chunk_rows=50))
    whole = read_upload(data, filename="f.csv")
    assert whole.meta["encoding_fallback"] == "cp1252" and len(whole) == 1200


def test_a_head_that_is_not_utf8_decodes_the_whole_file_first() -> None:
    lines = _long_text().split("\n")
    lines.insert(3, "# observer's note: caf\u00e9")
    data = "\n".join(lines).encode("cp1252")
    whole = read_upload(data, filename="f.csv")
    pieces = list(read_upload_chunks(data, filename="f.csv", chunk_rows=50))
    pd.testing.assert_frame_equal(
        pd.concat([p.columns for p in pieces], ignore_index=True), whole.columns
    )
    assert whole.meta["encoding_fallback"] == whole.meta["encoding"] == "cp1252"
    assert all(p.meta["encoding_fallback"] == p.meta["encoding"] == "cp1252" for p in pieces)


def test_the_row_limit_holds_for_the_pieces() -> None:
    from lcstore.ingest.readers import ReadError

    data = _long_text().encode()
    with pytest.raises(ReadError):
        list(read_upload_chunks(data, filename="f.csv", chunk_rows=50, max_rows=1000))
    assert sum(map(len, read_upload_chunks(data, filename="f.csv", max_rows=1200))) == 1200


def test_a_json_file_is_read_whole_and_sliced() -> None:
    data = b'{"columns": {"t": [1, 2, 3, 4, 5], "v": [1.5, 2.5, 3.5, 4.5, 5.5]}}'
    whole = read_upload(data, filename="f.json")
    pieces = list(read_upload_chunks(data, filename="f.json", chunk_rows=2))
    assert [len(p) for p in pieces] == [2, 2, 1]
    pd.testing.assert_frame_equal(
        pd.concat([p.columns for p in pieces], ignore_index=True), whole.columns
    )


@pytest.mark.django_db
def test_an_upload_in_pieces_stores_what_one_piece_stores(
    two_sources: dict[str, Any], contributor: Any, monkeypatch: Any
) -> None:
    import lcstore.services as services

    df = _rows(600)  # past the 400-line head that fixes delimiter and header
    data = _csv(df)
    params = UploadParams(**{**PARAMS.__dict__, "columns": _columns()})
    monkeypatch.setattr(services, "STREAM_ROWS", 40)
    upload = upload_create(uploader=contributor, data=data, file_name="night.csv", params=params)

    # Every row is stored exactly as written (TDB at the barycentre, mJy: no conversion).
    stored = pd.DataFrame(
        FluxPoint.objects.filter(upload_id=upload.pk)
        .order_by("source__slug", "band__slug", "t", "id")
        .values("t", "value", "error", "upper_limit", "source__slug", "band__slug")
    )
    expected = df.sort_values(["source", "band", "time"], kind="stable").reset_index(drop=True)
    np.testing.assert_array_equal(stored["t"], expected["time"])
    np.testing.assert_array_equal(stored["value"], expected["flux"])
    np.testing.assert_array_equal(stored["error"].astype(float), expected["err"])
    np.testing.assert_array_equal(stored["upper_limit"], expected["limit"])
    assert list(stored["source__slug"]) == list(expected["source"])
    assert list(stored["band__slug"]) == list(expected["band"])

    # The counts and provenance are the file's, not the last piece's.
    upload.refresh_from_db()
    assert (upload.n_rows, upload.n_points) == (600, 600)
    assert upload.n_upper_limits == int(df["limit"].sum())
    assert (upload.time_min, upload.time_max) == (df["time"].min(), df["time"].max())
    assert sorted(upload.sources.values_list("slug", flat=True)) == ["brook-2", "tarn-7"]
    metadata = upload.parameters["metadata"]
    assert sorted(metadata["sources"]) == ["brook-2", "tarn-7"]
    assert sorted(metadata["bands"]) == ["r", "v"]
    assert upload.warnings == []

    # The file is kept as a zlib stream of exactly the bytes sent.
    f = StoredFile.objects.get(pk=upload.file_id)
    assert f.encoding == "zlib" and zlib.decompress(bytes(f.content)) == data
    assert f.original() == data and f.size == len(data)
    assert hashlib.sha256(f.original()).hexdigest() == upload.file_id


@pytest.mark.django_db
@pytest.mark.parametrize(
    "bad, lines",
    [
        # first piece, seventh piece, an unknown source, and past the 400-line head
        ({2: ("flux", "bright"), 26: ("flux", "-"), 27: ("source", "nowhere-9"),
          550: ("flux", "1,5")}, {5, 29, 30, 553}),
        ({550: ("flux", "1,5")}, {553}),  # only past the head: the COPY had begun
    ],
)  # fmt: skip
def test_a_bad_row_in_a_later_piece_is_reported_as_for_the_whole_file(
    two_sources: dict[str, Any], contributor: Any, monkeypatch: Any, bad: dict, lines: set
) -> None:
    import lcstore.services as services

    df = _rows(600).astype({"flux": object})
    for row, (column, text) in bad.items():
        df.loc[row, column] = text
    data = _csv(df)
    params = UploadParams(**{**PARAMS.__dict__, "columns": _columns()})

    def problems(stream_rows: int) -> list[tuple[Any, Any, str]]:
        monkeypatch.setattr(services, "STREAM_ROWS", stream_rows)
        with pytest.raises(UploadInvalid) as info:
            upload_create(uploader=contributor, data=data, file_name="night.csv", params=params)
        return [(p.row, p.column, p.message) for p in info.value.problems]

    in_pieces, at_once = problems(4), problems(10_000)
    assert in_pieces == at_once
    # file lines: 1 comment, 2 header, data from line 3
    assert {row for row, _, _ in in_pieces} == lines
    assert FluxPoint.objects.count() == 0
    assert Upload.objects.count() == 0 and StoredFile.objects.count() == 0


@pytest.mark.django_db
def test_an_encoding_problem_past_the_head_is_answered_as_for_the_whole_file(
    two_sources: dict[str, Any], contributor: Any, monkeypatch: Any
) -> None:
    """A Windows-1252 byte past the head: stored with the whole file's fallback, as in one
    piece. A control byte there: the whole file's error (with its offset), nothing stored."""
    import lcstore.services as services

    params = UploadParams(**{**PARAMS.__dict__, "columns": _columns()})
    lines = _csv(_rows(600)).decode().split("\n")
    lines.insert(560, "# observer's note: caf\u00e9")
    latin = "\n".join(lines).encode("cp1252")
    monkeypatch.setattr(services, "STREAM_ROWS", 40)
    upload = upload_create(uploader=contributor, data=latin, file_name="n.csv", params=params)
    assert upload.n_points == 600
    assert upload.warnings == ["file was not UTF-8; read as cp1252"]
    assert StoredFile.objects.get(pk=upload.file_id).original() == latin

    binary = latin.replace(b"caf\xe9", b"caf\x01")

    def problems(stream_rows: int) -> list[tuple[Any, Any, str]]:
        monkeypatch.setattr(services, "STREAM_ROWS", stream_rows)
        with pytest.raises(UploadInvalid) as info:
            upload_create(uploader=contributor, data=binary, file_name="b.csv", params=params)
        return [(p.row, p.column, p.message) for p in info.value.problems]

    in_pieces = problems(40)
    assert in_pieces == problems(10_000)
    assert "byte 0x01 at offset" in in_pieces[0][2]
    assert Upload.objects.count() == 1 and FluxPoint.objects.count() == 600


@pytest.mark.django_db
def test_a_file_that_does_not_shrink_is_kept_as_sent() -> None:
    from django.db import transaction
    from django.utils import timezone

    from lcstore.ingest.load import stored_file_save

    data = np.random.default_rng(3).bytes(4096)  # random bytes: zlib makes them longer
    packed = zlib.compress(data, 1)
    assert len(packed) > len(data)
    sha = hashlib.sha256(data).hexdigest()
    with transaction.atomic():
        stored_file_save(sha256=sha, data=data, now=timezone.now(), packed=packed)
    f = StoredFile.objects.get(pk=sha)
    assert f.encoding == "" and bytes(f.content) == data and f.original() == data
