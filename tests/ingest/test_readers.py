"""Tests of lcstore.ingest.readers: every format read back against the library that wrote it.

Reference libraries: pandas.read_csv (with the delimiter, header and decimal mark
given explicitly) for the CSV variants; astropy Table.write/read (ECSV, VOTable,
FITS) and astropy.io.fits for the FITS headers; the json module for JSON.
"""

from __future__ import annotations

import io
import json

import numpy as np
import pandas as pd
import pytest
from astropy import units as u
from astropy.io import fits, votable
from astropy.io.votable import tree
from astropy.table import MaskedColumn, Table
from astropy.time import Time
from astropy.utils import iers
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal

from lcstore.ingest.readers import (
    FORMATS,
    FileProblem,
    RawTable,
    ReadError,
    infer_format,
    read_upload,
)

iers.conf.auto_download = False
iers.conf.auto_max_age = None

ROWS = [(59000.125, 15.213, 0.021), (59001.25, 15.3, 0.03), (59002.5, 14.987, 0.0125)]
NAMES = ["mjd", "mag", "err"]


def _reference(text: str, **kwargs: object) -> pd.DataFrame:
    """What pandas reads when told the delimiter, header and decimal mark (the oracle)."""
    return pd.read_csv(io.StringIO(text), **kwargs)  # type: ignore[call-overload]


def _assert_frame(raw: RawTable, expected: pd.DataFrame) -> None:
    assert list(raw.columns.columns) == list(expected.columns)
    for name in expected.columns:
        got, want = raw.columns[name], expected[name]
        if pd.api.types.is_numeric_dtype(want.dtype):
            assert pd.api.types.is_numeric_dtype(got.dtype), name
            assert_allclose(got.to_numpy(float), want.to_numpy(float), rtol=0, atol=0)
        else:
            assert got.astype(str).str.strip().tolist() == want.astype(str).str.strip().tolist()


def _csv_text(sep: str, decimal: str = ".", header: bool = True) -> str:
    lines = [sep.join(NAMES)] if header else []
    for row in ROWS:
        lines.append(sep.join(repr(v).replace(".", decimal) for v in row))
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- infer_format


@pytest.mark.parametrize(
    ("data", "filename", "expected"),
    [
        (b"SIMPLE  =                    T" + b" " * 50, "x.csv", "fits"),
        (b'<?xml version="1.0"?>\n<VOTABLE version="1.4">', None, "votable"),
        (b"  <VOTABLE>", "a.txt", "votable"),
        (b"# %ECSV 1.0\n# ---\n", "a.csv", "ecsv"),
        (b"\xef\xbb\xbf# %ECSV 1.0\n", None, "ecsv"),
        (b'[{"a": 1}]', None, "json"),
        (b'\n {"rows": []}', "x.dat", "json"),
        (b"a,b\n1,2\n", "table.FITS", "fits"),
        (b"a,b\n1,2\n", "table.vot", "votable"),
        (b"a,b\n1,2\n", "t.ecsv", "ecsv"),
        (b"a,b\n1,2\n", "t.json", "json"),
        (b"a,b\n1,2\n", "t.tsv", "csv"),
        (b"a,b\n1,2\n", None, "csv"),
        (b"a,b\n1,2\n", "noextension", "csv"),
    ],
)
def test_infer_format(data: bytes, filename: str | None, expected: str) -> None:
    assert infer_format(data, filename) == expected


def test_formats_constant() -> None:
    assert FORMATS == ("csv", "ecsv", "votable", "fits", "json")


# --------------------------------------------------------------------------- CSV variants


@pytest.mark.parametrize(
    ("sep", "decimal", "meta_delimiter"),
    [
        (",", ".", ","),
        (";", ".", ";"),
        (";", ",", ";"),
        ("\t", ".", "\t"),
        ("\t", ",", "\t"),
        ("|", ".", "|"),
    ],
)
def test_csv_delimiters_match_pandas(sep: str, decimal: str, meta_delimiter: str) -> None:
    # Oracle: pandas.read_csv told the delimiter and decimal mark explicitly.
    text = _csv_text(sep, decimal)
    raw = read_upload(text.encode(), filename="photometry.csv")
    _assert_frame(raw, _reference(text, sep=sep, decimal=decimal))
    assert raw.format == "csv"
    assert raw.meta["delimiter"] == meta_delimiter
    assert raw.meta["decimal"] == decimal
    assert raw.meta["header"] == "file"
    assert raw.units == dict.fromkeys(NAMES)
    assert_array_equal(raw.row_numbers, [2, 3, 4])


def test_csv_whitespace_runs_and_indentation() -> None:
    text = "   mjd     mag   err\n" + "".join(f"  {a:<12} {b}\t  {c}   \n" for a, b, c in ROWS)
    raw = read_upload(text.encode())
    # Oracle: pandas with its own whitespace splitting.
    _assert_frame(raw, _reference(text, sep=r"\s+"))
    assert raw.meta["delimiter"] == "whitespace"


def test_csv_without_header_names_columns_and_says_so() -> None:
    text = _csv_text(",", header=False)
    raw = read_upload(text.encode())
    expected = _reference(text, header=None, names=["col1", "col2", "col3"])
    _assert_frame(raw, expected)
    assert raw.meta["header"] == "none"
    assert_array_equal(raw.row_numbers, [1, 2, 3])


def test_csv_header_from_the_comment_line_above_the_data() -> None:
    text = "# site: invented\n# mjd mag err\n" + _csv_text(" ", header=False)
    raw = read_upload(text.encode(), filename="lc.dat")
    assert list(raw.columns.columns) == NAMES
    assert raw.meta["header"] == "comment"
    assert raw.meta["comments"] == ["site: invented", "mjd mag err"]
    assert_array_equal(raw.row_numbers, [3, 4, 5])


@pytest.mark.parametrize("mark", ["#", "%", "!"])
def test_csv_comment_and_blank_lines_keep_file_line_numbers(mark: str) -> None:
    text = (
        f"{mark} header comment\n\n"
        "mjd,mag,err\n"
        f"{ROWS[0][0]},{ROWS[0][1]},{ROWS[0][2]}\n"
        f"   {mark} a comment between rows\n"
        "   \n"
        f"{ROWS[1][0]},{ROWS[1][1]},{ROWS[1][2]}\n"
        f"{ROWS[2][0]},{ROWS[2][1]},{ROWS[2][2]}"  # no final newline
    )
    raw = read_upload(text.encode())
    assert_array_equal(raw.row_numbers, [4, 7, 8])
    assert_allclose(raw.columns["mag"], [r[1] for r in ROWS])
    assert raw.meta["comments"] == ["header comment", "a comment between rows"]


def test_csv_hash_inside_a_line_is_data() -> None:
    raw = read_upload(b"name,mag\nsrc#1,15.0\n")
    assert raw.columns["name"].tolist() == ["src#1"]


def test_csv_bom_and_crlf() -> None:
    text = _csv_text(",").replace("\n", "\r\n")
    raw = read_upload(b"\xef\xbb\xbf" + text.encode())
    _assert_frame(raw, _reference(_csv_text(",")))
    assert raw.meta["encoding"] == "utf-8-sig"
    assert "encoding_fallback" not in raw.meta


def test_csv_old_mac_line_ends() -> None:
    raw = read_upload(_csv_text(",").replace("\n", "\r").encode())
    _assert_frame(raw, _reference(_csv_text(",")))


def test_csv_utf16_with_bom() -> None:
    raw = read_upload(_csv_text(";").encode("utf-16"))
    _assert_frame(raw, _reference(_csv_text(";"), sep=";"))
    assert raw.meta["encoding"] == "utf-16"


def test_csv_latin1_fallback_is_noted() -> None:
    text = "# observer: Zoë Ångström-free\nmjd;filtre;mag\n59000,5;Bé;15,2\n"
    raw = read_upload(text.encode("latin-1"))
    assert raw.columns["filtre"].tolist() == ["Bé"]
    assert raw.meta["encoding_fallback"] in ("cp1252", "latin-1")
    assert_allclose(raw.columns["mjd"], [59000.5])


def test_csv_quoted_fields_match_pandas() -> None:
    text = 'name,note,mag\n"src, A","say ""hi""",15.5\n"src B", "spaced, quoted", 16.0\n'
    raw = read_upload(text.encode())
    # Oracle: pandas' own quote handling, with blanks skipped after a delimiter.
    _assert_frame(raw, _reference(text, skipinitialspace=True))
    assert raw.columns["note"].tolist() == ['say "hi"', "spaced, quoted"]


def test_csv_blanks_after_delimiters_and_empty_cells() -> None:
    raw = read_upload(b"mjd, mag, band\n59000.1, 15.2, B\n59000.2, , V\n")
    assert list(raw.columns.columns) == ["mjd", "mag", "band"]
    assert_allclose(raw.columns["mag"], [15.2, np.nan])
    assert raw.columns["band"].tolist() == ["B", "V"]


def test_csv_trailing_delimiter_column_is_dropped() -> None:
    raw = read_upload(b"a,b,\n1,2,\n3,4,\n")
    assert list(raw.columns.columns) == ["a", "b"]


def test_csv_types_numbers_text_and_booleans() -> None:
    raw = read_upload(b"t,n,s,flag\n1.5,3,x,True\n2.5,4,y,False\n")
    df = raw.columns
    assert df["t"].dtype == np.float64
    assert df["n"].dtype == np.int64
    assert pd.api.types.is_string_dtype(df["s"].dtype)
    assert df["flag"].dtype == bool


def test_csv_iso_times_are_data_not_a_header() -> None:
    raw = read_upload(b"2022-01-01T00:00:00,15.2\n2022-01-02T00:00:00,15.3\n")
    assert raw.meta["header"] == "none"
    assert raw.columns["col1"].tolist() == ["2022-01-01T00:00:00", "2022-01-02T00:00:00"]


def test_csv_single_column() -> None:
    raw = read_upload(b"mag\n15.0\n16.0\n")
    assert_allclose(raw.columns["mag"], [15.0, 16.0])


def test_csv_many_rows_row_numbers() -> None:
    n = 50_000
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"t": np.arange(n) * 0.01, "f": rng.normal(size=n)})
    data = b"# comment\n" + frame.to_csv(index=False).encode()
    raw = read_upload(data)
    assert len(raw) == n
    assert_array_equal(raw.row_numbers[[0, -1]], [3, n + 2])
    assert_allclose(raw.columns["f"], frame["f"], rtol=1e-15)


# --------------------------------------------------------------------------- CSV failures


def test_csv_ragged_rows_name_their_lines() -> None:
    text = "mjd,mag,err\n1,2,3\n4,5\n# comment\n6,7,8,9\n10,11,12\n"
    with pytest.raises(ReadError, match="wrong number of fields") as info:
        read_upload(text.encode())
    assert info.value.problems == [
        FileProblem(3, None, "2 fields where the other rows have 3"),
        FileProblem(5, None, "4 fields where the other rows have 3"),
    ]
    assert "line 3" in str(info.value)


def test_csv_header_with_fewer_names_than_fields() -> None:
    with pytest.raises(ReadError, match="wrong number of fields") as info:
        read_upload(b"a,b\n1,2,3\n4,5,6\n7,8,9\n")
    assert info.value.problems[0].row == 1
    assert "header has 2 names" in info.value.problems[0].message


@pytest.mark.parametrize(
    ("data", "match"),
    [
        (b"", "empty"),
        (b" \n\t\r\n", "empty"),
        (b"# only comments\n% and more\n\n", "no data rows"),
        (b"mjd,mag\n", "no data rows"),
        (b"mjd,mjd\n1,2\n", "unique"),
        (b'a,b\n"open,1\n2,3\n', "not closed"),
        (b"\x00\x01\x02\x03\x04PK junk", "binary"),
        (bytes(range(256)) * 4, "binary"),
        (b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR", "binary"),
        (bytes([0xC3, 0xA9, 0xFF, 0xFE, 0xE9, 0xE8]) * 30, "neither UTF-8 nor Latin-1"),
    ],
)
def test_csv_failures(data: bytes, match: str) -> None:
    with pytest.raises(ReadError, match=match):
        read_upload(data, filename="upload.csv")


def test_csv_limits() -> None:
    data = _csv_text(",").encode()
    with pytest.raises(ReadError, match="3 data rows; at most 2"):
        read_upload(data, max_rows=2)
    with pytest.raises(ReadError, match="3 columns; at most 2"):
        read_upload(data, max_columns=2)
    assert len(read_upload(data, max_rows=3, max_columns=3)) == 3


# --------------------------------------------------------------------------- ECSV


def _astropy_table() -> Table:
    table = Table()
    table["mjd"] = np.array([r[0] for r in ROWS]) * u.day
    table["flux"] = np.array([1.5, 2.25, 3.0]) * u.mJy
    table["flux_err"] = MaskedColumn([0.1, 0.2, 0.3], unit="mJy", mask=[False, True, False])
    table["band"] = ["B", "V", "R"]
    table["n"] = MaskedColumn([1, 2, 3], mask=[False, False, True])
    table["upper_limit"] = [False, True, False]
    return table


def _check_round_trip(raw: RawTable) -> None:
    # Oracle: the astropy Table that wrote the file.
    ref = _astropy_table()
    assert list(raw.columns.columns) == ref.colnames
    assert_allclose(raw.columns["mjd"], ref["mjd"].value, rtol=0)
    assert_allclose(raw.columns["flux"], ref["flux"].value, rtol=0)
    assert_allclose(raw.columns["flux_err"], [0.1, np.nan, 0.3], rtol=0)
    assert_allclose(raw.columns["n"], [1, 2, np.nan])
    assert raw.columns["band"].tolist() == ["B", "V", "R"]
    assert raw.columns["upper_limit"].tolist() == [False, True, False]
    assert u.Unit(raw.units["mjd"]) == u.day
    assert u.Unit(raw.units["flux"]) == u.mJy
    assert u.Unit(raw.units["flux_err"]) == u.mJy
    assert raw.units["band"] is None
    assert_array_equal(raw.row_numbers, [1, 2, 3])


def test_ecsv_round_trip() -> None:
    table = _astropy_table()
    table.meta["observer"] = "invented"
    table.meta["TIMESYS"] = "UTC"
    buf = io.StringIO()
    table.write(buf, format="ascii.ecsv")
    raw = read_upload(buf.getvalue().encode(), filename="x.ecsv")
    assert raw.format == "ecsv"
    _check_round_trip(raw)
    assert raw.meta == {"observer": "invented", "TIMESYS": "UTC"}


def test_ecsv_time_column_is_given_as_values_with_its_format() -> None:
    table = Table()
    table["t"] = Time([59000.5, 59001.5], format="mjd", scale="tt")
    table["f"] = [1.0, 2.0]
    buf = io.StringIO()
    table.write(buf, format="ascii.ecsv")
    raw = read_upload(buf.getvalue().encode())
    assert_allclose(raw.columns["t"], [59000.5, 59001.5], rtol=0)
    assert raw.meta["time_columns"] == {"t": {"format": "mjd", "scale": "tt"}}


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("# %ECSV 1.0\n# ---\n# datatype: [\nx\n", "ECSV file cannot be read"),
        (
            "# %ECSV 1.0\n# ---\n# datatype:\n# - {name: a, datatype: float64}\na\nfoo\n",
            "ECSV file cannot be read",
        ),
        ("# %ECSV 1.0\n# ---\n# datatype:\n# - {name: a, datatype: float64}\na\n", "no data rows"),
    ],
)
def test_ecsv_failures(text: str, match: str) -> None:
    with pytest.raises(ReadError, match=match):
        read_upload(text.encode())


def test_ecsv_must_be_utf8() -> None:
    with pytest.raises(ReadError, match="must be UTF-8"):
        read_upload(b"# %ECSV 1.0\n# \xe9\n")


def test_ecsv_multidimensional_column_is_refused() -> None:
    table = Table({"a": np.zeros((3, 2)), "b": [1, 2, 3]})
    buf = io.StringIO()
    table.write(buf, format="ascii.ecsv")
    with pytest.raises(ReadError, match="holds an array in each cell") as info:
        read_upload(buf.getvalue().encode())
    assert info.value.problems[0].column == "a"


# --------------------------------------------------------------------------- VOTable


def test_votable_round_trip() -> None:
    buf = io.BytesIO()
    _astropy_table().write(buf, format="votable")
    raw = read_upload(buf.getvalue(), filename="x.xml")
    assert raw.format == "votable"
    _check_round_trip(raw)


def test_votable_params_info_and_timesys_in_meta() -> None:
    table = Table({"mjd": [59000.1, 59000.2], "rate": [1.0, 2.0]})
    table["mjd"].unit = "d"
    table["rate"].unit = "ct/s"
    vot = votable.from_table(table)
    vot.infos.append(tree.Info(name="mission", value="invented"))
    resource = vot.resources[0]
    resource.time_systems.append(
        tree.TimeSys(
            ID="tt_geo",
            timeorigin="MJD-origin",
            timescale="TT",
            refposition="GEOCENTER",
            config={"version_1_4_or_later": True},
        )
    )
    resource.params.append(
        tree.Param(vot, name="energy_min", datatype="double", value="0.3", unit="keV")
    )
    first = vot.get_first_table()
    first.fields[0].ref = "tt_geo"
    buf = io.BytesIO()
    vot.to_xml(buf)
    raw = read_upload(buf.getvalue())
    assert raw.meta["mission"] == "invented"
    assert raw.meta["energy_min"] == pytest.approx(0.3)
    assert u.Unit(raw.meta["param_units"]["energy_min"]) == u.keV
    system = {"scale": "tt", "reference": "GEOCENTER", "origin": "MJD-origin"}
    assert raw.meta["timesys"] == {"tt_geo": system}
    assert raw.meta["time_columns"] == {"mjd": system}
    assert u.Unit(raw.units["rate"]) == u.ct / u.s


@pytest.mark.parametrize(
    ("data", "match"),
    [
        (b'<?xml version="1.0"?>\n<VOTABLE version="1.4"><RESOURCE><TABLE>', "cannot be read"),
        (b'<?xml version="1.0"?>\n<VOTABLE version="1.4"></VOTABLE>', "no TABLE"),
        (b"<?xml version='1.0'?><html><body>not a table</body></html>", "VOTable"),
        (b"<VOTABLE><<<>>>", "cannot be read"),
    ],
)
def test_votable_failures(data: bytes, match: str) -> None:
    with pytest.raises(ReadError, match=match):
        read_upload(data)


# --------------------------------------------------------------------------- FITS


def _fits_bytes(*hdus: fits.hdu.base.ExtensionHDU, primary: fits.PrimaryHDU | None = None) -> bytes:
    buf = io.BytesIO()
    fits.HDUList([primary or fits.PrimaryHDU(), *hdus]).writeto(buf)
    return buf.getvalue()


def _gamma_hdu() -> fits.BinTableHDU:
    hdu = fits.BinTableHDU.from_columns(
        [
            fits.Column(name="TIME", format="D", unit="s", array=[0.0, 86400.0, 172800.0]),
            fits.Column(name="FLUX", format="E", unit="ph cm-2 s-1", array=[1e-7, 2e-7, 3e-8]),
            fits.Column(name="UL", format="L", array=[False, False, True]),
            fits.Column(name="NPRED", format="J", null=-1, array=[12, -1, 3]),
            fits.Column(name="NOTE", format="6A", array=["ok", "flare", ""]),
        ]
    )
    # REFERENCES §3: the trap case TIME = 0, TT, MJDREFI/MJDREFF must reach the caller as written.
    hdu.header["TIMESYS"] = "TT"
    hdu.header["MJDREFI"] = 51910
    hdu.header["MJDREFF"] = 7.428703703703703e-4
    hdu.header["TIMEUNIT"] = "s"
    hdu.header["TREFPOS"] = "GEOCENTER"
    hdu.header["TIMEREF"] = "GEOCENTRIC"
    hdu.header["TELESCOP"] = "table value"
    hdu.header["COMMENT"] = "a table comment"
    return hdu


def test_fits_binary_table_columns_units_and_header() -> None:
    primary = fits.PrimaryHDU()
    primary.header["TELESCOP"] = "primary value"
    primary.header["OBSERVER"] = "invented"
    primary.header["HISTORY"] = "made for a test"
    raw = read_upload(_fits_bytes(_gamma_hdu(), primary=primary), filename="lc.fits")
    assert raw.format == "fits"
    df = raw.columns
    # Oracle: the arrays written with astropy.io.fits; times are not converted.
    assert_allclose(df["TIME"], [0.0, 86400.0, 172800.0], rtol=0)
    assert_allclose(df["FLUX"], np.float32([1e-7, 2e-7, 3e-8]), rtol=0)
    assert df["UL"].tolist() == [False, False, True]
    assert_allclose(df["NPRED"], [12, np.nan, 3])  # TNULL -> NaN
    assert df["NOTE"].tolist() == ["ok", "flare", ""]
    assert u.Unit(raw.units["FLUX"]) == u.ph / u.cm**2 / u.s
    assert u.Unit(raw.units["TIME"]) == u.s
    assert raw.units["UL"] is None
    meta = raw.meta
    assert meta["TIMESYS"] == "TT"
    assert meta["MJDREFI"] == 51910
    assert meta["MJDREFF"] == pytest.approx(7.428703703703703e-4, rel=1e-14)  # 20-char card
    assert meta["TIMEUNIT"] == "s"
    assert meta["TREFPOS"] == "GEOCENTER"
    assert meta["TIMEREF"] == "GEOCENTRIC"
    assert meta["TELESCOP"] == "table value"  # the table header wins
    assert meta["OBSERVER"] == "invented"  # the primary header shows through
    assert meta["HISTORY"] == ["made for a test"]
    assert meta["COMMENT"] == ["a table comment"]
    for structural in ("NAXIS", "NAXIS2", "TTYPE1", "TFORM2", "TUNIT1", "BITPIX", "XTENSION"):
        assert structural not in meta


def test_fits_round_trip_of_an_astropy_table() -> None:
    buf = io.BytesIO()
    _astropy_table().write(buf, format="fits")
    _check_round_trip(read_upload(buf.getvalue()))


def test_fits_ascii_table_extension() -> None:
    hdu = fits.TableHDU.from_columns(
        [
            fits.Column(name="MJD", format="F12.5", unit="d", array=[59000.5, 59001.5]),
            fits.Column(name="MAG", format="F8.3", array=[15.25, 15.5]),
        ]
    )
    raw = read_upload(_fits_bytes(hdu))
    assert_allclose(raw.columns["MJD"], [59000.5, 59001.5])
    assert u.Unit(raw.units["MJD"]) == u.day


def test_fits_skips_empty_tables_and_images() -> None:
    empty = fits.BinTableHDU.from_columns([fits.Column(name="A", format="D", array=[])])
    image = fits.ImageHDU(np.zeros((4, 4)))
    raw = read_upload(_fits_bytes(image, empty, _gamma_hdu()))
    assert len(raw) == 3


@pytest.mark.parametrize(
    ("hdus", "match"),
    [
        ((fits.ImageHDU(np.zeros((2, 2))),), "no table extension"),
        (
            (fits.BinTableHDU.from_columns([fits.Column(name="A", format="D", array=[])]),),
            "have no rows",
        ),
        (
            (
                fits.BinTableHDU.from_columns(
                    [fits.Column(name="A", format="3D", array=np.zeros((2, 3)))]
                ),
            ),
            "array in each cell",
        ),
    ],
)
def test_fits_failures(hdus: tuple[fits.hdu.base.ExtensionHDU, ...], match: str) -> None:
    with pytest.raises(ReadError, match=match):
        read_upload(_fits_bytes(*hdus))


@pytest.mark.parametrize("cut", [100, 2880, 2880 + 500, 2 * 2880, 2 * 2880 + 10, -1500, -2880])
def test_fits_truncated(cut: int) -> None:
    data = _fits_bytes(_gamma_hdu(), _gamma_hdu())
    # A cut at 2880 bytes leaves a complete primary HDU: a valid file without a table.
    match = "no table extension" if cut == 2880 else "FITS file is truncated|cannot be read"
    with pytest.raises(ReadError, match=match):
        read_upload(data[:cut])


def test_fits_truncated_data_block() -> None:
    rows = 5000
    hdu = fits.BinTableHDU.from_columns(
        [fits.Column(name="T", format="D", array=np.arange(rows, dtype=float))]
    )
    data = _fits_bytes(hdu)
    with pytest.raises(ReadError, match="truncated"):
        read_upload(data[: 2 * 2880 + 8000])


def test_fits_limits() -> None:
    data = _fits_bytes(_gamma_hdu())
    with pytest.raises(ReadError, match="at most 2 are allowed"):
        read_upload(data, max_rows=2)
    with pytest.raises(ReadError, match="5 columns; at most 4"):
        read_upload(data, max_columns=4)


# --------------------------------------------------------------------------- JSON


@pytest.mark.parametrize(
    "doc",
    [
        [{"mjd": r[0], "mag": r[1], "err": r[2]} for r in ROWS],
        {"rows": [{"mjd": r[0], "mag": r[1], "err": r[2]} for r in ROWS], "units": {"mag": "mag"}},
        {
            "columns": {n: [r[i] for r in ROWS] for i, n in enumerate(NAMES)},
            "units": {"mjd": "d", "mag": "mag"},
            "meta": {"observer": "invented"},
        },
    ],
    ids=["list-of-rows", "rows", "columns"],
)
def test_json_shapes(doc: object) -> None:
    raw = read_upload(json.dumps(doc).encode(), filename="x.json")
    assert raw.format == "json"
    # Oracle: the json module's own reading of the same document.
    expected = pd.DataFrame([dict(zip(NAMES, r, strict=True)) for r in ROWS])
    _assert_frame(raw, expected)
    units = doc.get("units", {}) if isinstance(doc, dict) else {}
    assert raw.units == {n: units.get(n) for n in NAMES}
    meta = doc.get("meta", {}) if isinstance(doc, dict) else {}
    assert raw.meta == meta
    assert_array_equal(raw.row_numbers, [1, 2, 3])


def test_json_mixed_and_missing_cells() -> None:
    doc = [
        {"t": 1, "band": "B", "ul": True, "x": None},
        {"t": 2.5, "ul": False},
        {"t": 3, "band": "V", "ul": False, "x": "text"},
    ]
    raw = read_upload(json.dumps(doc).encode())
    df = raw.columns
    assert df["t"].dtype == np.float64
    assert df["band"].tolist() == ["B", None, "V"]
    assert df["ul"].dtype == bool
    assert df["x"].tolist() == [None, None, "text"]


def test_json_integers_beyond_int64() -> None:
    raw = read_upload(json.dumps([{"a": 2**64, "b": 10**400}, {"a": 1, "b": 2}]).encode())
    assert raw.columns["a"].dtype == np.float64
    assert raw.columns["a"].iloc[0] == pytest.approx(2.0**64)
    assert raw.columns["b"].tolist() == [10**400, 2]  # beyond float: kept as written


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ('{"rows": [1, 2', "invalid JSON at line 1"),
        ("[1, 2]", "each row must be an object"),
        ('"just text"', "list of row objects or an object"),
        ("{}", "exactly one of 'rows'"),
        ('{"rows": [], "columns": {}}', "exactly one of 'rows'"),
        ('{"rows": []}', "no data rows"),
        ("[]", "no data rows"),
        ('{"rows": {"a": 1}}', "'rows' must be a list"),
        ('{"columns": {"a": [1, 2], "b": [1]}}', "differ in length"),
        ('{"columns": {"a": 1}}', "mapping each column name to a list"),
        ('{"rows": [{"a": 1}], "units": {"a": 5}}', "'units' must be an object"),
        ('{"rows": [{"a": 1}], "meta": [1]}', "'meta' must be an object"),
        ('[{"a": [1, 2]}]', "holds lists or objects"),
        ('[{"a": {"b": 1}}]', "holds lists or objects"),
        ("[" * 100_000, "invalid JSON"),
    ],
)
def test_json_failures(text: str, match: str) -> None:
    with pytest.raises(ReadError, match=match):
        read_upload(text.encode(), format="json")


def test_json_must_be_utf8() -> None:
    with pytest.raises(ReadError, match="must be UTF-8"):
        read_upload('[{"a": "é"}]'.encode("latin-1"))


def test_json_limits() -> None:
    data = json.dumps({"columns": {"a": [1, 2, 3], "b": [4, 5, 6]}}).encode()
    with pytest.raises(ReadError, match="at most 2 are allowed"):
        read_upload(data, max_rows=2)
    with pytest.raises(ReadError, match="2 columns; at most 1"):
        read_upload(data, max_columns=1)


# --------------------------------------------------------------------------- entry point


def test_unknown_format() -> None:
    with pytest.raises(ReadError, match="unknown format 'xlsx'"):
        read_upload(b"a,b\n1,2\n", format="xlsx")


def test_explicit_wrong_format_gets_a_hint() -> None:
    data = _fits_bytes(_gamma_hdu())
    with pytest.raises(ReadError, match="looks like fits, not json") as info:
        read_upload(data, format="json")
    assert "looks like fits" in info.value.problems[0].message


def test_read_error_text_lists_located_problems() -> None:
    error = ReadError("bad rows", [FileProblem(7, "mag", "not a number")], row_label="line")
    assert str(error) == "bad rows: line 7, column 'mag': not a number"
    assert ReadError("whole file").problems == [FileProblem(None, None, "whole file")]
    assert isinstance(error, ValueError)


# --------------------------------------------------------------------------- property tests


def _read_or_read_error(data: bytes, **kwargs: object) -> None:
    try:
        raw = read_upload(data, **kwargs)  # type: ignore[arg-type]
    except ReadError as exc:
        assert exc.problems and all(isinstance(p, FileProblem) for p in exc.problems)
        assert str(exc)
    else:
        assert isinstance(raw, RawTable)
        assert len(raw.row_numbers) == len(raw.columns)


_FILENAMES = st.sampled_from([None, "x.csv", "x.fits", "x.xml", "x.ecsv", "x.json", "x.bin"])


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.binary(max_size=2000), filename=_FILENAMES)
def test_random_bytes_raise_only_read_error(data: bytes, filename: str | None) -> None:
    _read_or_read_error(data, filename=filename)


@settings(max_examples=120, deadline=None)
@given(
    data=st.binary(max_size=600),
    fmt=st.sampled_from(FORMATS),
    prefix=st.sampled_from(
        [b"", b"SIMPLE  =                    T", b"# %ECSV 1.0\n# ---\n", b"<?xml", b"[{", b"a,b\n"]
    ),
)
def test_random_bytes_in_every_format_raise_only_read_error(
    data: bytes, fmt: str, prefix: bytes
) -> None:
    _read_or_read_error(prefix + data, format=fmt)


_CELL = st.text(alphabet='0123456789.,;|\t "#%!-eE+abcNnA\r', max_size=8)


@settings(max_examples=100, deadline=None)
@given(
    lines=st.lists(st.lists(_CELL, min_size=1, max_size=5), min_size=1, max_size=12),
    sep=st.sampled_from([",", ";", "\t", "|", " ", "  "]),
)
def test_random_delimited_text_raises_only_read_error(lines: list[list[str]], sep: str) -> None:
    text = "\n".join(sep.join(cells) for cells in lines)
    _read_or_read_error(text.encode(), filename="x.csv")


_FITS_SAMPLE = _fits_bytes(_gamma_hdu())


@settings(max_examples=60, deadline=None)
@given(cut=st.integers(min_value=0, max_value=len(_FITS_SAMPLE) - 1))
def test_every_truncated_fits_is_refused(cut: int) -> None:
    with pytest.raises(ReadError):
        read_upload(_FITS_SAMPLE[:cut], filename="x.fits")
