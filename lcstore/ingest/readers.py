"""Read an uploaded file (CSV, ECSV, VOTable, FITS table or JSON) into one plain table.

A reader only turns bytes into named columns, their units and the file's own
metadata; it does not decide what the columns mean (the column mapping and the
unit and time conversion come later). Whatever the bytes hold, the only
exception that leaves :func:`read_upload` is :class:`ReadError`, which lists the
problems found with the row (as the user counts it in the file) and column.

No Django here: the upload service calls :func:`read_upload` with the bytes.

Formats
-------
``csv``
    Delimited text. Lines whose first non-blank character is ``#``, ``%`` or
    ``!`` are comments and blank lines are skipped (only whole lines: a ``#``
    later in a line is data). The delimiter is one of tab, semicolon, comma,
    ``|`` or runs of blanks, chosen on the first 100 lines: the first of those
    (in that order) that splits every line into the same number (> 1) of
    fields. With a semicolon, tab or blank delimiter, numbers written with a
    decimal comma (``15,23``) are read as numbers. The first line is a header
    when none of its fields looks like data (a number or an ISO date);
    otherwise, if the comment line just above the data names exactly as many
    columns, those are the names, else the columns are called ``col1 … colN``
    (``meta["header"]`` says which: ``"file"``, ``"comment"`` or ``"none"``).
    Fields may be quoted with ``"`` (a doubled ``""`` is a literal quote), but
    a quoted field may not hold a line break. Text is UTF-8 (a byte-order mark
    is allowed; UTF-16 with a byte-order mark is converted); other text is read
    as Windows-1252, or Latin-1 where that fails, and ``meta["encoding_fallback"]``
    says so. CRLF and CR line ends are accepted. Text cells are stripped of
    surrounding blanks. Row numbers are the file's line numbers.
``ecsv``
    astropy's ECSV reader. Column units are kept; a column stored as an astropy
    ``Time`` is given as its values in its own format, and its format and scale
    go in ``meta["time_columns"]``.
``votable``
    The first table of the file (astropy.io.votable). Field units are kept.
    Each PARAM (of the file, its resources and the table) and INFO becomes a
    ``meta`` entry ``name: value`` (PARAMs win over INFOs of the same name), with
    ``meta["param_units"]`` for PARAMs that have a unit. TIMESYS elements go in
    ``meta["timesys"]``, and ``meta["time_columns"]`` maps each field that refers
    to one to its ``scale``, ``reference`` and ``origin``.
``fits``
    The first binary or ASCII table extension with rows, read with
    ``astropy.io.fits`` itself (no automatic time conversion). ``meta`` holds the
    table header's keywords over the primary header's (upper case, structural
    and per-column keywords such as ``NAXISn``/``TTYPEn`` left out; ``COMMENT``
    and ``HISTORY`` as lists), so MJDREFI/MJDREFF, TIMESYS, TIMEUNIT, TREFPOS,
    TIMEREF and TIMEZERO are there as written. ``TUNITn`` gives the units;
    ``TNULLn`` cells of integer columns become NaN.
``json``
    One of three shapes (UTF-8)::

        [{"time": 59000.1, "mag": 15.2}, ...]                 # list of row objects
        {"rows": [{...}, ...], "units": {...}, "meta": {...}}  # rows with units
        {"columns": {"time": [...], "mag": [...]}, "units": {...}, "meta": {...}}

    ``units`` (column name → unit string or null) and ``meta`` (an object) are
    optional. Cell values must be numbers, text, true/false or null; a key
    missing from a row object is null.

For every format, columns whose cells are all numbers come out as int or float
(float with NaN where cells are empty), true/false columns as bool, and other
columns as text; row order is the file's. ``meta["warnings"]`` lists warnings
the format library raised while reading (for example an unrecognised unit).
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
import io
import json
import re
import warnings
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

__all__ = [
    "FORMATS",
    "FileProblem",
    "RawTable",
    "ReadError",
    "infer_format",
    "read_upload",
    "read_upload_chunks",
]

FORMATS = ("csv", "ecsv", "votable", "fits", "json")

_EXTENSIONS = {
    ".csv": "csv",
    ".tsv": "csv",
    ".txt": "csv",
    ".dat": "csv",
    ".ecsv": "ecsv",
    ".xml": "votable",
    ".vot": "votable",
    ".votable": "votable",
    ".fits": "fits",
    ".fit": "fits",
    ".fts": "fits",
    ".json": "json",
}
_SHOWN_PROBLEMS = 1000  # row problems listed in full; the rest are counted
_SAMPLE_LINES = 100  # lines used to choose the CSV delimiter and header
_HEAD_LINES = 20_000  # most lines planned and parsed before read_upload_chunks yields
_COMMENT_BYTES = (ord("#"), ord("%"), ord("!"))
_BLANK_BYTES = (ord(" "), ord("\t"), ord("\r"))
_DELIMITERS = ("\t", ";", ",", "|")  # in order of preference; blanks are tried last
_WHITESPACE = " "  # stands for "runs of blanks" as a delimiter
_CONTROL_BYTES = bytes([*range(0x00, 0x09), 0x0B, 0x0C, *range(0x0E, 0x20), 0x7F])
_CONTROL = re.compile(b"[" + re.escape(_CONTROL_BYTES) + b"]")
_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eEdD][+-]?\d+)?$|^[+-]?(nan|inf|infinity)$", re.I)
_DECIMAL_COMMA = re.compile(r"^[+-]?\d+,\d+([eE][+-]?\d+)?$")
_DECIMAL_POINT = re.compile(r"^[+-]?\d*\.\d+([eE][+-]?\d+)?$")
_ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}")
_WS_FIELD = re.compile(r'"((?:[^"]|"")*)"|(\S+)')
_FITS_STRUCTURAL = re.compile(
    r"^(SIMPLE|BITPIX|NAXIS\d*|EXTEND|XTENSION|PCOUNT|GCOUNT|TFIELDS|THEAP|END|"
    r"(TTYPE|TFORM|TUNIT|TNULL|TSCAL|TZERO|TDISP|TDIM|TBCOL)\d+)$"
)
_EXTRA_NA = ["--"]  # astropy's text spelling of a masked cell


@dataclass
class FileProblem:
    """One thing wrong with a file.

    ``row`` is the data row as the user counts it in the file (for CSV the line
    number, else the 1-based row index), or None for the whole file; ``column``
    the column name, or None.
    """

    row: int | None
    column: str | None
    message: str

    def __str__(self) -> str:
        return self.describe()

    def describe(self, row_label: str = "row") -> str:
        """The problem as text, the row called ``row_label`` (``line`` for CSV)."""
        where = []
        if self.row is not None:
            where.append(f"{row_label} {self.row}")
        if self.column is not None:
            where.append(f"column {self.column!r}")
        return f"{', '.join(where)}: {self.message}" if where else self.message


class ReadError(ValueError):
    """The file cannot be read as a table; ``problems`` says where and why."""

    def __init__(
        self,
        message: str,
        problems: Sequence[FileProblem] | None = None,
        *,
        row_label: str = "row",
    ) -> None:
        self.message = message
        self.row_label = row_label
        self.problems: list[FileProblem] = (
            list(problems) if problems else [FileProblem(None, None, message)]
        )
        super().__init__(message)

    def __str__(self) -> str:
        located = [p for p in self.problems if p.row is not None or p.column is not None]
        if not located:
            return self.message
        shown = "; ".join(p.describe(self.row_label) for p in located[:5])
        more = len(located) - 5
        return f"{self.message}: {shown}" + (f"; and {more} more" if more > 0 else "")


@dataclass
class RawTable:
    """A file read into named columns, before any column has a meaning.

    ``columns`` keeps the file's column names and row order; ``units`` maps each
    column to the unit string the file gives (None if none); ``meta`` holds the
    file-level metadata (see the module docstring per format); ``row_numbers``
    gives for each row the number to report in errors.
    """

    format: str
    columns: pd.DataFrame
    units: dict[str, str | None]
    meta: dict[str, Any]
    row_numbers: np.ndarray = field(repr=False)

    def __len__(self) -> int:
        return len(self.columns)


# --------------------------------------------------------------------------- helpers


@contextlib.contextmanager
def _captured_warnings() -> Iterator[list[str]]:
    """Collect the warnings a format library raises instead of letting them escape."""
    messages: list[str] = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        yield messages
    for w in caught:
        text = str(w.message)
        if text not in messages:
            messages.append(text)


def _check_limits(
    n_rows: int, n_columns: int, max_rows: int | None, max_columns: int | None
) -> None:
    if max_rows is not None and n_rows > max_rows:
        raise ReadError(f"the file has {n_rows} data rows; at most {max_rows} are allowed")
    if max_columns is not None and n_columns > max_columns:
        raise ReadError(f"the file has {n_columns} columns; at most {max_columns} are allowed")


def _plain(value: Any) -> Any:
    """A metadata value as plain Python (numbers, text, lists, None)."""
    if isinstance(value, np.ma.MaskedArray):
        return None if np.all(value.mask) else _plain(value.filled())
    if isinstance(value, np.ndarray):
        return value.item() if value.ndim == 0 else value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, bytes):
        return value.decode("utf-8", errors="replace")
    if isinstance(value, str | int | float | bool) or value is None:
        return value
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    return str(value)


def _unit_string(unit: Any, fmt: str | None = None) -> str | None:
    """A unit as astropy's generic string; text astropy cannot parse is kept as written."""
    if unit is None or unit == "":
        return None
    import astropy.units as u

    try:
        with _captured_warnings():
            parsed = (
                u.Unit(unit, format=fmt, parse_strict="raise") if isinstance(unit, str) else unit
            )
            text = parsed.to_string()
    except Exception:  # noqa: BLE001 - astropy raises several types for a bad unit
        return str(unit).strip() or None
    return text or None


def _array_column(name: str, values: np.ndarray, null: Any = None) -> np.ndarray:
    """One plain column from a numpy (possibly masked) array; arrays per cell are refused."""
    if values.ndim != 1 or values.dtype.kind == "O" and _holds_arrays(values):
        raise ReadError(
            f"column {name!r} holds an array in each cell; only columns of single values "
            "can be read",
            [FileProblem(None, name, "column holds arrays, not single values")],
        )
    mask = np.ma.getmaskarray(values) if isinstance(values, np.ma.MaskedArray) else None
    data = np.ma.getdata(values)
    if data.dtype.kind in "iu" and null is not None:
        null_mask = data == null
        mask = null_mask if mask is None else mask | null_mask
    kind = data.dtype.kind
    if kind == "S":
        data = np.char.decode(data, "utf-8", errors="replace")
        kind = "U"
    if data.dtype.byteorder not in ("=", "|"):
        data = data.astype(data.dtype.newbyteorder("="))
    if mask is None or not mask.any():
        if kind == "U":
            return np.char.strip(data).astype(object)
        return np.array(data)
    if kind in "iuf":
        out = data.astype(float)
        out[mask] = np.nan
        return out
    out = (np.char.strip(data) if kind == "U" else data).astype(object)
    out[mask] = None
    return out


def _holds_arrays(values: np.ndarray) -> bool:
    return bool(len(values)) and isinstance(values[0], np.ndarray | list | tuple)


# --------------------------------------------------------------------------- format sniffing


def _content_format(data: bytes) -> str | None:
    """The format the first bytes announce, or None when they say nothing."""
    if data[:9] == b"SIMPLE  =":
        return "fits"
    head = data[:4096]
    head = head.removeprefix(b"\xef\xbb\xbf").lstrip()
    if head.startswith(b"# %ECSV"):
        return "ecsv"
    if head.startswith(b"<"):
        if b"<VOTABLE" in head or b"<votable" in head or head.startswith(b"<?xml"):
            return "votable"
        return None
    if head[:1] in (b"[", b"{"):
        return "json"
    return None


def infer_format(data: bytes, filename: str | None) -> str:
    """Guess the format: by content first, then by file name extension, else ``csv``.

    Content signs: ``SIMPLE  =`` at byte 0 (FITS), an XML declaration or
    ``<VOTABLE`` (VOTable), ``# %ECSV`` (ECSV), ``[`` or ``{`` (JSON).
    """
    found = _content_format(bytes(data[:4096]))
    if found:
        return found
    if filename:
        name = filename.lower()
        for ext, fmt in _EXTENSIONS.items():
            if name.endswith(ext):
                return fmt
    return "csv"


# --------------------------------------------------------------------------- text decoding


def _utf8_bytes(data: bytes) -> tuple[bytes, str, str | None]:
    """The text as UTF-8 bytes without a byte-order mark, its encoding and any fallback used."""
    if data.startswith(b"\xef\xbb\xbf"):
        data, encoding = data[3:], "utf-8-sig"
    elif data.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            data = data.decode("utf-16").encode("utf-8")
        except UnicodeDecodeError as exc:
            raise ReadError(f"the file starts like UTF-16 text but is not: {exc.reason}") from None
        encoding = "utf-16"
    else:
        encoding = "utf-8"
    # bytes.translate runs in C and is several times faster than a regex search.
    bad = _CONTROL.search(data) if len(data.translate(None, _CONTROL_BYTES)) < len(data) else None
    if bad:
        raise ReadError(
            f"the file holds binary data (byte 0x{bad.group()[0]:02x} at offset {bad.start()}), "
            "not text; is it the right file and format?"
        )
    try:
        data.decode("utf-8")
    except UnicodeDecodeError:
        pass
    else:
        return data, encoding, None
    high = np.count_nonzero(np.frombuffer(data, dtype=np.uint8) >= 0x80)
    if high > 0.3 * len(data):
        raise ReadError(
            "the file is neither UTF-8 nor Latin-1 text; is it the right file and format?"
        )
    for fallback in ("cp1252", "latin-1"):
        try:
            return data.decode(fallback).encode("utf-8"), fallback, fallback
        except UnicodeDecodeError:
            continue
    raise ReadError("the file is not readable text")  # pragma: no cover - latin-1 decodes any byte


def _clean_utf8(text: bytes) -> bool:
    """Whether ``text`` is UTF-8 with no control bytes: what :func:`_utf8_bytes` passes as is."""
    if len(text.translate(None, _CONTROL_BYTES)) < len(text):
        return False
    if text.isascii():
        return True
    try:
        text.decode("utf-8")
    except UnicodeDecodeError:
        return False
    return True


def _utf8_text(data: bytes, what: str) -> str:
    """Strict UTF-8 text (formats whose standard says UTF-8)."""
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ReadError(
            f"{what} must be UTF-8 text; byte 0x{data[exc.start]:02x} at offset {exc.start} is not"
        ) from None


# --------------------------------------------------------------------------- CSV


def _split_fields(line: str, delimiter: str) -> list[str]:
    if delimiter == _WHITESPACE:
        return [q.replace('""', '"') if q or not b else b for q, b in _WS_FIELD.findall(line)]
    try:
        return next(csv.reader([line], delimiter=delimiter, quotechar='"', skipinitialspace=True))
    except (csv.Error, StopIteration):
        return [line]


def _choose_delimiter(sample: list[str]) -> str:
    """The first delimiter that splits every sample line into the same number (> 1) of fields.

    When none is consistent (a ragged file) the one with the most lines at its most
    common count is used, so that the bad lines can be named.
    """
    best, best_share = ",", 0.0
    for delimiter in (*_DELIMITERS, _WHITESPACE):
        counts = [len(_split_fields(line, delimiter)) for line in sample]
        values, freq = np.unique(counts, return_counts=True)
        if len(values) == 1 and values[0] > 1:
            return delimiter
        multi = values > 1
        if multi.any():
            share = freq[multi].max() / len(counts)
            if share > best_share:
                best, best_share = delimiter, share
    return best


def _looks_like_data(text: str) -> bool:
    text = text.strip()
    return bool(_NUMBER.match(text) or _DECIMAL_COMMA.match(text) or _ISO_DATE.match(text))


def _line_starts(arr: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start and end (exclusive, without the newline) of every line of a byte array."""
    n = arr.size
    nl = np.flatnonzero(arr == 10)
    starts = np.concatenate(([0], nl + 1))
    ends = np.concatenate((nl, [n]))
    if starts[-1] == n:  # the file ends with a newline
        starts, ends = starts[:-1], ends[:-1]
    return starts, ends


def _first_solid(arr: np.ndarray, starts: np.ndarray, ends: np.ndarray) -> np.ndarray:
    """Position of the first non-blank byte of each line (``end`` for a blank line).

    Advances all lines one byte at a time, only those still on a blank byte, so
    the cost is the number of lines times their indentation, without a loop over lines.
    """
    pos = starts.copy()
    todo = np.arange(starts.size)
    last = max(arr.size - 1, 0)
    while todo.size:
        p = pos[todo]
        blank = (p < ends[todo]) & np.isin(arr[np.minimum(p, last)], _BLANK_BYTES)
        todo = todo[blank]
        pos[todo] += 1
    return pos


def _field_counts(arr: np.ndarray, delimiter: str) -> tuple[np.ndarray, int | None]:
    """Fields on each line of ``arr`` (every line ends with a newline), outside quotes.

    Quote parity is a running XOR of the quote bytes, so a delimiter inside
    ``"..."`` (including doubled quotes) is not counted. Also returns the index
    of the first line that ends inside an open quote, or None.
    """
    nl = np.flatnonzero(arr == 10)
    quote = arr == ord('"')
    inside = None
    if quote.any():
        inside = np.bitwise_xor.accumulate(quote.view(np.uint8)).astype(bool)
        open_at_end = np.flatnonzero(inside[nl])
        if open_at_end.size:
            return np.zeros(nl.size, dtype=np.int64), int(open_at_end[0])
    if delimiter == _WHITESPACE:
        sep = np.isin(arr, (32, 9, 13, 10))
        if inside is not None:
            sep &= ~inside
        start = ~sep
        start[1:] &= sep[:-1]
        positions = np.flatnonzero(start)
        return np.bincount(np.searchsorted(nl, positions), minlength=nl.size), None
    hit = arr == ord(delimiter)
    if inside is not None:
        hit &= ~inside
    positions = np.flatnonzero(hit)
    return np.bincount(np.searchsorted(nl, positions), minlength=nl.size) + 1, None


def _fields(n: int, word: str = "field") -> str:
    return f"{n} {word}" + ("" if n == 1 else "s")


def _ragged_problems(
    counts: np.ndarray, line_numbers: np.ndarray, has_header: bool
) -> tuple[int, list[FileProblem]]:
    """The usual number of fields and a problem for each line that has another number."""
    data_counts = counts[1:] if has_header else counts
    values, freq = np.unique(data_counts, return_counts=True)
    common = values[freq == freq.max()]
    expected = int(counts[0]) if has_header and counts[0] in common else int(common[0])
    problems: list[FileProblem] = []
    if has_header and counts[0] != expected:
        problems.append(
            FileProblem(
                int(line_numbers[0]),
                None,
                f"the header has {_fields(int(counts[0]), 'name')} but the data rows have "
                f"{_fields(expected)}",
            )
        )
    offset = 1 if has_header else 0
    bad = np.flatnonzero(data_counts != expected)
    for i in bad[:_SHOWN_PROBLEMS]:
        problems.append(
            FileProblem(
                int(line_numbers[i + offset]),
                None,
                f"{_fields(int(data_counts[i]))} where the other rows have {expected}",
            )
        )
    if bad.size > _SHOWN_PROBLEMS:
        problems.append(
            FileProblem(None, None, f"and {bad.size - _SHOWN_PROBLEMS} more lines like these")
        )
    return expected, problems


@dataclass
class _CsvPlan:
    """A delimited-text file after the whole-file checks, ready for the parser.

    ``body`` holds the data lines only (no header, comments or blank lines), each
    ending with a newline; ``row_numbers`` gives the file line of each of them.
    """

    body: bytes
    row_numbers: np.ndarray
    names: list[str]
    unnamed: list[str]
    options: dict[str, Any]
    meta: dict[str, Any]


def _line_kinds(
    arr: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Line starts and ends, first non-blank byte, comment mask and data-line indices."""
    starts, ends = _line_starts(arr)
    solid = _first_solid(arr, starts, ends)
    blank = solid >= ends
    first_byte = arr[np.minimum(solid, max(arr.size - 1, 0))]
    comment = ~blank & np.isin(first_byte, _COMMENT_BYTES)
    kept = np.flatnonzero(~blank & ~comment)
    return starts, ends, solid, comment, kept


def _kept_bytes(
    text: bytes, offset: int, arr: np.ndarray, starts: np.ndarray, kept: np.ndarray
) -> bytes:
    """The lines ``kept`` of ``arr`` (= ``text`` from ``offset``), each ending with a newline."""
    if kept.size == starts.size - kept[0] and np.all(np.diff(kept) == 1):
        body = text[offset + int(starts[kept[0]]) : offset + arr.size]  # one run to the end
    else:
        keep_line = np.zeros(starts.size, dtype=bool)
        keep_line[kept] = True
        body = arr[np.repeat(keep_line, np.diff(np.append(starts, arr.size)))].tobytes()
    return body if body.endswith(b"\n") else body + b"\n"


def _spaced(body: bytes, delimiter: str) -> bool:
    """Whether a field follows a delimiter with blanks (the parser then skips them, at a cost)."""
    return delimiter != _WHITESPACE and (
        (delimiter + " ").encode() in body or (delimiter + "\t").encode() in body
    )


def _csv_plan(data: bytes, max_rows: int | None, max_columns: int | None) -> _CsvPlan:
    """Every check that needs the whole file: encoding, delimiter, header, field counts."""
    text, encoding, fallback = _utf8_bytes(data)
    if b"\n" not in text and b"\r" in text:  # old Mac line ends
        text = text.replace(b"\r", b"\n")
    if text.isspace():
        raise ReadError("the file is empty")
    arr = np.frombuffer(text, dtype=np.uint8)
    starts, ends, solid, comment, kept = _line_kinds(arr)
    comment_lines = np.flatnonzero(comment)
    comments = [
        text[solid[i] : ends[i]].decode("utf-8").lstrip("#%!").strip() for i in comment_lines[:1000]
    ]
    if kept.size == 0:
        raise ReadError("no data rows: the file holds only comments or blank lines")

    sample = [text[starts[i] : ends[i]].decode("utf-8").rstrip("\r") for i in kept[:_SAMPLE_LINES]]
    delimiter = _choose_delimiter(sample)
    first_fields = [f.strip() for f in _split_fields(sample[0], delimiter)]
    has_header = any(first_fields) and not any(_looks_like_data(f) for f in first_fields)
    data_sample = sample[1:] if has_header else sample
    decimal = "."
    if delimiter != ",":
        cells = [c.strip() for line in data_sample for c in _split_fields(line, delimiter)]
        if any(_DECIMAL_COMMA.match(c) for c in cells) and not any(
            _DECIMAL_POINT.match(c) for c in cells
        ):
            decimal = ","

    # Only the header and data lines go to the parser.
    body = _kept_bytes(text, 0, arr, starts, kept)
    line_numbers = kept + 1
    n_rows = kept.size - (1 if has_header else 0)
    if n_rows == 0:
        raise ReadError("no data rows: the file has a header line but nothing below it")

    counts, open_line = _field_counts(np.frombuffer(body, dtype=np.uint8), delimiter)
    if open_line is not None:
        raise ReadError(
            "a quoted field is not closed before the end of its line (line breaks inside "
            "quotes are not supported)",
            [FileProblem(int(line_numbers[open_line]), None, 'a quote (") is not closed')],
        )
    n_fields, problems = _ragged_problems(counts, line_numbers, has_header)
    if problems:
        raise ReadError("rows with the wrong number of fields", problems)
    _check_limits(n_rows, n_fields, max_rows, max_columns)

    header_source = "file"
    if has_header:
        names = first_fields
    else:
        names = _comment_header(text, solid, ends, comment, kept[0], delimiter, n_fields)
        header_source = "comment" if names else "none"
        names = names or [f"col{i + 1}" for i in range(n_fields)]
    names, unnamed = _fill_names(names)
    duplicates = sorted({n for n in names if names.count(n) > 1})
    if duplicates:
        row = int(line_numbers[0]) if has_header else None
        raise ReadError(
            "column names must be unique",
            [
                FileProblem(row, n, f"the column name {n!r} appears more than once")
                for n in duplicates
            ],
        )

    if has_header:
        body = body[body.index(b"\n") + 1 :]
    # Skipping blanks after a delimiter costs the parser a third more time: only when needed.
    spaced = _spaced(body, delimiter)
    meta: dict[str, Any] = {
        "delimiter": "whitespace" if delimiter == _WHITESPACE else delimiter,
        "decimal": decimal,
        "header": header_source,
        "encoding": encoding,
        "comments": comments,
    }
    if fallback:
        meta["encoding_fallback"] = fallback
    row_numbers = line_numbers[1:] if has_header else line_numbers
    return _CsvPlan(
        body=body,
        row_numbers=np.asarray(row_numbers, dtype=np.int64),
        names=names,
        unnamed=unnamed,
        options={
            "sep": r"\s+" if delimiter == _WHITESPACE else delimiter,
            "skipinitialspace": spaced,
            "decimal": decimal,
        },
        meta=meta,
    )


def _csv_parse(plan: _CsvPlan, body: bytes, row_numbers: np.ndarray) -> RawTable:
    """Parse data lines of a planned file (all of ``plan.body``, or a run of its lines)."""
    try:
        with _captured_warnings() as caught:
            df = pd.read_csv(
                io.BytesIO(body),
                header=None,
                names=plan.names,
                engine="c",
                quotechar='"',
                na_values=_EXTRA_NA,
                keep_default_na=True,
                skip_blank_lines=False,
                index_col=False,
                low_memory=False,
                encoding="utf-8",
                **plan.options,
            )
    except (ValueError, pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise ReadError(f"the file cannot be read as delimited text: {exc}") from None
    if len(df) != len(row_numbers):
        raise ReadError(
            f"the parser found {len(df)} rows where the file has {len(row_numbers)} data lines "
            "(a quote or line break in an odd place?)"
        )
    for name in plan.unnamed:  # an empty trailing field on every line, say
        if df[name].isna().all():
            df = df.drop(columns=name)
    for name in df.columns:
        if not (
            pd.api.types.is_numeric_dtype(df[name].dtype)
            or pd.api.types.is_bool_dtype(df[name].dtype)
        ):
            df[name] = df[name].str.strip()
    meta = dict(plan.meta)
    if caught:
        meta["warnings"] = caught
    return RawTable(
        format="csv",
        columns=df.reset_index(drop=True),
        units=dict.fromkeys(map(str, df.columns)),
        meta=meta,
        row_numbers=row_numbers,
    )


def _read_csv(data: bytes, max_rows: int | None, max_columns: int | None) -> RawTable:
    plan = _csv_plan(data, max_rows, max_columns)
    return _csv_parse(plan, plan.body, plan.row_numbers)


def _csv_chunks(plan: _CsvPlan, chunk_rows: int) -> Iterator[RawTable]:
    """The planned file parsed in runs of ``chunk_rows`` data lines, in file order."""
    n = plan.row_numbers.size
    if n <= chunk_rows:
        yield _csv_parse(plan, plan.body, plan.row_numbers)
        return
    ends = np.flatnonzero(np.frombuffer(plan.body, dtype=np.uint8) == 10) + 1
    start = 0
    for first in range(0, n, chunk_rows):
        last = min(first + chunk_rows, n)
        stop = int(ends[last - 1])
        yield _csv_parse(plan, plan.body[start:stop], plan.row_numbers[first:last])
        start = stop


def _after_lines(text: bytes, start: int, k: int) -> int:
    """The offset just past the ``k``-th newline from ``start`` (or the end of ``text``)."""
    window = max(64 * 1024, 64 * k)
    while True:
        end = min(len(text), start + window)
        view = np.frombuffer(text, dtype=np.uint8, count=end - start, offset=start)
        nl = np.flatnonzero(view == 10)
        if nl.size >= k:
            return start + int(nl[k - 1]) + 1
        if end == len(text):
            return end
        window *= 4


def _csv_piece(
    plan: _CsvPlan, text: bytes, start: int, stop: int, lines_before: int, n_fields: int
) -> RawTable | None:
    """Lines ``start:stop`` of a text file, checked and parsed with the decisions of ``plan``.

    The checks of :func:`_csv_plan` that look at each line (blank, comment, field
    count, open quote) are repeated on these lines only; a line that fails them is
    a :class:`ReadError` (the caller reads the file whole to report it). None when
    the lines hold no data.
    """
    arr = np.frombuffer(text, dtype=np.uint8, count=stop - start, offset=start)
    starts, _, _, _, kept = _line_kinds(arr)
    if kept.size == 0:
        return None
    body = _kept_bytes(text, start, arr, starts, kept)
    delimiter = plan.meta["delimiter"]
    delimiter = _WHITESPACE if delimiter == "whitespace" else delimiter
    counts, open_line = _field_counts(np.frombuffer(body, dtype=np.uint8), delimiter)
    if open_line is not None or np.any(counts != n_fields):
        raise ReadError("a line further down the file does not fit the first lines")
    options = {**plan.options, "skipinitialspace": _spaced(body, delimiter)}
    row_numbers = (kept + lines_before + 1).astype(np.int64)
    return _csv_parse(dataclasses.replace(plan, options=options), body, row_numbers)


def _csv_stream(
    data: bytes, max_rows: int | None, max_columns: int | None, chunk_rows: int
) -> Iterator[RawTable]:
    """A text file in pieces, checking each line as its piece comes (see read_upload_chunks).

    The delimiter, decimal mark, header and column names are decided on a head
    (the first piece: up to ``chunk_rows`` and at most 20,000 lines, but at least
    400) that holds the whole sample :func:`_csv_plan` uses, so they are the
    whole file's. The encoding is checked on the head, then on each later piece
    as it comes; a file in UTF-16, or whose head is not plain UTF-8, is decoded
    whole first (a fallback such as cp1252 holds for the whole file).
    Every later piece must then be UTF-8 without control bytes, and each line must
    have the head's number of fields; a file where one does not, or that goes over
    ``max_rows``, raises :class:`ReadError` at that piece, and the whole-file
    reader names the problem (or decodes the file with its fallback).
    """
    checked = data.startswith((b"\xff\xfe", b"\xfe\xff"))  # UTF-16: decoded whole
    if checked:
        text, encoding, fallback = _utf8_bytes(data)
    elif data.startswith(b"\xef\xbb\xbf"):
        text, encoding, fallback = data[3:], "utf-8-sig", None
    else:
        text, encoding, fallback = data, "utf-8", None
    if b"\n" not in text and b"\r" in text:  # old Mac line ends
        text = text.replace(b"\r", b"\n")
    if text.isspace():
        raise ReadError("the file is empty")
    # A short first piece: nothing reaches the server before it is parsed and converted.
    head_lines = max(min(chunk_rows, _HEAD_LINES), 4 * _SAMPLE_LINES)
    while True:
        head = _after_lines(text, 0, head_lines)
        if not checked and not _clean_utf8(text[:head]):
            # The whole file's decoding decides (a fallback, or the offset of a bad byte).
            text, encoding, fallback = _utf8_bytes(data)
            if b"\n" not in text and b"\r" in text:
                text = text.replace(b"\r", b"\n")
            checked = True
            continue
        plan = _csv_plan(text[:head], max_rows, max_columns)
        header = 1 if plan.meta["header"] == "file" else 0
        if head == len(text) or plan.row_numbers.size + header > _SAMPLE_LINES:
            break
        head_lines *= 4
    if plan.unnamed:  # whether such a column is dropped depends on every row
        table = _read_csv(data, max_rows, max_columns)
        yield from _sliced(table, chunk_rows)
        return
    plan.meta["encoding"] = encoding
    if fallback:
        plan.meta["encoding_fallback"] = fallback
    yield from _csv_chunks(plan, chunk_rows)
    n_rows = plan.row_numbers.size
    lines_before = text.count(b"\n", 0, head)
    start = head
    while start < len(text):
        stop = _after_lines(text, start, chunk_rows)
        if not checked and not _clean_utf8(text[start:stop]):
            raise ReadError("the text further down is not UTF-8, or holds control bytes")
        piece = _csv_piece(plan, text, start, stop, lines_before, len(plan.names))
        lines_before += text.count(b"\n", start, stop)
        start = stop
        if piece is None:
            continue
        n_rows += len(piece)
        if max_rows is not None and n_rows > max_rows:
            raise ReadError(f"the file has more than {max_rows} rows")
        yield piece


def _comment_header(
    text: bytes,
    solid: np.ndarray,
    ends: np.ndarray,
    comment: np.ndarray,
    first_data: int,
    delimiter: str,
    n_fields: int,
) -> list[str] | None:
    """Column names from the comment line just above the data, if it names every column."""
    above = first_data - 1
    while above >= 0 and solid[above] >= ends[above]:  # skip blank lines
        above -= 1
    if above < 0 or not comment[above]:
        return None
    line = text[solid[above] : ends[above]].decode("utf-8").lstrip("#%! \t").rstrip()
    names = [f.strip() for f in _split_fields(line, delimiter)]
    if (
        len(names) != n_fields
        or not all(names)
        or len(set(names)) != len(names)
        or any(_looks_like_data(n) for n in names)
    ):
        return None
    return names


def _fill_names(names: list[str]) -> tuple[list[str], list[str]]:
    """Empty header names become ``colN`` (and are reported back as unnamed)."""
    filled, unnamed = [], []
    for i, name in enumerate(names):
        if name:
            filled.append(name)
        else:
            filled.append(f"col{i + 1}")
            unnamed.append(f"col{i + 1}")
    return filled, unnamed


# --------------------------------------------------------------------------- astropy tables


def _from_astropy_table(
    table: Any,
    fmt: str,
    meta: dict[str, Any],
    max_rows: int | None,
    max_columns: int | None,
) -> RawTable:
    """Plain columns, units and row numbers from an astropy Table."""
    from astropy.table import Column
    from astropy.time import Time

    _check_limits(len(table), len(table.colnames), max_rows, max_columns)
    if len(table) == 0:
        raise ReadError("the table has no data rows")
    columns: dict[str, np.ndarray] = {}
    units: dict[str, str | None] = {}
    time_columns: dict[str, Any] = dict(meta.get("time_columns", {}))
    for name in table.colnames:
        col = table[name]
        if isinstance(col, Time):
            if col.ndim != 1:
                raise ReadError(
                    f"column {name!r} holds an array in each cell",
                    [FileProblem(None, name, "column holds arrays, not single values")],
                )
            columns[name] = np.asarray(col.value)
            units[name] = None
            time_columns[name] = {"format": col.format, "scale": col.scale}
            continue
        if not isinstance(col, Column):
            raise ReadError(
                f"column {name!r} is a {type(col).__name__}; only plain columns can be read",
                [FileProblem(None, name, f"unsupported column type {type(col).__name__}")],
            )
        columns[name] = _array_column(name, col.data if col.dtype.kind != "O" else np.asarray(col))
        units[name] = _unit_string(col.unit)
    if time_columns:
        meta["time_columns"] = time_columns
    return RawTable(
        format=fmt,
        columns=pd.DataFrame(columns),
        units=units,
        meta=meta,
        row_numbers=np.arange(1, len(table) + 1, dtype=np.int64),
    )


def _read_ecsv(data: bytes, max_rows: int | None, max_columns: int | None) -> RawTable:
    from astropy.io import ascii

    text = _utf8_text(data, "an ECSV file")
    if not text.lstrip().startswith("# %ECSV"):
        raise ReadError("not an ECSV file: it must start with the line '# %ECSV <version>'")
    try:
        with _captured_warnings() as caught:
            table = ascii.read(text, format="ecsv", guess=False, fast_reader=False)
    except Exception as exc:  # noqa: BLE001 - astropy raises many types for a broken header or body
        raise ReadError(f"the ECSV file cannot be read: {exc}") from None
    meta = {str(k): _plain(v) for k, v in table.meta.items()}
    if caught:
        meta["warnings"] = caught
    return _from_astropy_table(table, "ecsv", meta, max_rows, max_columns)


def _read_votable(data: bytes, max_rows: int | None, max_columns: int | None) -> RawTable:
    from astropy.io import votable
    from astropy.io.votable.tree import Param

    try:
        with _captured_warnings() as caught:
            vot = votable.parse(io.BytesIO(data), verify="ignore")
            tables = list(vot.iter_tables())
            if not tables:
                raise ReadError("the VOTable holds no TABLE")
            first = tables[0]
            table = first.to_table(use_names_over_ids=True)
    except ReadError:
        raise
    except Exception as exc:  # noqa: BLE001 - expat and astropy raise many types for broken XML
        raise ReadError(f"the VOTable cannot be read: {exc}") from None

    meta: dict[str, Any] = {}
    param_units: dict[str, str] = {}
    for info in vot.iter_info():
        meta[str(info.name)] = _plain(info.value)
    for param in vot.iter_fields_and_params():
        if not isinstance(param, Param):
            continue
        meta[str(param.name)] = _plain(param.value)
        unit = _unit_string(param.unit)
        if unit:
            param_units[str(param.name)] = unit
    if param_units:
        meta["param_units"] = param_units
    systems = {
        ts.ID: {
            "scale": (ts.timescale or "").lower() or None,
            "reference": (ts.refposition or "").upper() or None,
            "origin": _plain(ts.timeorigin),
        }
        for ts in vot.iter_timesys()
    }
    if systems:
        meta["timesys"] = systems
        refs = {
            str(f.name): systems[f.ref]
            for f in first.fields
            if f.ref is not None and f.ref in systems
        }
        if refs:
            meta["time_columns"] = refs
    if caught:
        meta["warnings"] = caught
    return _from_astropy_table(table, "votable", meta, max_rows, max_columns)


def _fits_meta(*headers: Any) -> dict[str, Any]:
    from astropy.io.fits.card import Undefined

    meta: dict[str, Any] = {}
    notes: dict[str, list[str]] = {"COMMENT": [], "HISTORY": []}
    for header in headers:
        for card in header.cards:
            key = str(card.keyword).upper()
            if key in notes:
                notes[key].append(str(card.value))
            elif key and not _FITS_STRUCTURAL.match(key):
                value = card.value
                meta[key] = None if isinstance(value, Undefined) else _plain(value)
    meta.update({k: v for k, v in notes.items() if v})
    return meta


def _read_fits(data: bytes, max_rows: int | None, max_columns: int | None) -> RawTable:
    from astropy.io import fits

    if data[:9] != b"SIMPLE  =":
        raise ReadError("not a FITS file: it must start with 'SIMPLE  ='")
    try:
        with _captured_warnings() as caught:
            hdul = fits.open(io.BytesIO(data), memmap=False, lazy_load_hdus=False)
    except Exception as exc:  # noqa: BLE001 - OSError, ValueError, VerifyError... for a broken file
        raise ReadError(f"the FITS file cannot be read: {exc}") from None
    truncated = next((w for w in caught if "truncated" in w), None)
    if truncated is None and len(data) % 2880:
        truncated = f"its length ({len(data)} bytes) is not a multiple of 2880 bytes"
    if truncated:
        raise ReadError(f"the FITS file is truncated: {truncated}")
    try:
        tables = [h for h in hdul if isinstance(h, fits.BinTableHDU | fits.TableHDU)]
        hdu = None
        for candidate in tables:
            if candidate.header.get("NAXIS2", 0) > 0:
                hdu = candidate
                break
        if hdu is None:
            if tables:
                raise ReadError("the FITS file's table extensions have no rows")
            raise ReadError("the FITS file has no table extension (binary or ASCII table)")
        n_rows = int(hdu.header["NAXIS2"])
        n_cols = int(hdu.header.get("TFIELDS", 0))
        _check_limits(n_rows, n_cols, max_rows, max_columns)
        with _captured_warnings() as more:
            table = hdu.data
            columns: dict[str, np.ndarray] = {}
            units: dict[str, str | None] = {}
            for col in hdu.columns:
                values = table[col.name]
                if isinstance(values, np.ndarray) and values.ndim > 1:
                    raise ReadError(
                        f"column {col.name!r} holds an array in each cell (TFORM {col.format}); "
                        "only columns of single values can be read",
                        [FileProblem(None, col.name, "column holds arrays, not single values")],
                    )
                columns[col.name] = _array_column(col.name, np.asarray(values), null=col.null)
                units[col.name] = _unit_string(col.unit, "fits") if col.unit else None
    except ReadError:
        raise
    except Exception as exc:  # noqa: BLE001 - numpy/astropy errors on an inconsistent table
        raise ReadError(f"the FITS table cannot be read: {exc}") from None
    meta = _fits_meta(hdul[0].header, hdu.header)
    messages = [*caught, *(m for m in more if m not in caught)]
    if messages:
        meta["warnings"] = messages
    return RawTable(
        format="fits",
        columns=pd.DataFrame(columns),
        units=units,
        meta=meta,
        row_numbers=np.arange(1, n_rows + 1, dtype=np.int64),
    )


# --------------------------------------------------------------------------- JSON


def _json_column(name: str, values: pd.Series) -> pd.Series:
    """A column of JSON cell values as numbers, booleans or text."""
    kind = pd.api.types.infer_dtype(values, skipna=True)
    has_null = bool(values.isna().any())
    if kind in ("integer", "floating", "mixed-integer-float", "integer-na", "decimal"):
        # Integers beyond int64 become floats; beyond the float range they stay as written.
        targets = [np.int64, float] if kind == "integer" and not has_null else [float]
        for target in targets:
            try:
                return values.astype(target)
            except (OverflowError, ValueError, TypeError):
                continue
        return values.astype(object)
    if kind == "boolean":
        return values.astype(object if has_null else bool)
    if kind == "empty":
        return pd.Series(np.full(len(values), np.nan), index=values.index)
    if kind == "string":
        return values.astype(object)
    nested = values.map(lambda v: isinstance(v, list | dict)).to_numpy(dtype=bool)
    if nested.any():
        rows = np.flatnonzero(nested)
        raise ReadError(
            f"column {name!r} holds lists or objects; cells must be numbers, text, "
            "true/false or null",
            [FileProblem(int(r) + 1, name, "cell is a list or object") for r in rows[:20]],
        )
    return values.astype(object)


def _read_json(data: bytes, max_rows: int | None, max_columns: int | None) -> RawTable:
    text = _utf8_text(data, "a JSON file")
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ReadError(
            f"invalid JSON at line {exc.lineno}, column {exc.colno}: {exc.msg}"
        ) from None
    except (RecursionError, ValueError) as exc:
        raise ReadError(f"invalid JSON: {exc}") from None

    units_in: Any = {}
    meta_in: Any = {}
    if isinstance(doc, list):
        rows: Any = doc
        columns_in: Any = None
    elif isinstance(doc, dict):
        if ("rows" in doc) == ("columns" in doc):
            raise ReadError(
                "a JSON object must have exactly one of 'rows' (a list of row objects) or "
                "'columns' (an object of equal-length lists)"
            )
        rows, columns_in = doc.get("rows"), doc.get("columns")
        units_in, meta_in = doc.get("units", {}) or {}, doc.get("meta", {}) or {}
    else:
        raise ReadError("a JSON file must hold a list of row objects or an object")
    if not isinstance(units_in, dict) or not all(
        isinstance(v, str) or v is None for v in units_in.values()
    ):
        raise ReadError("'units' must be an object mapping column names to unit strings")
    if not isinstance(meta_in, dict):
        raise ReadError("'meta' must be an object")

    if columns_in is not None:
        if not isinstance(columns_in, dict) or not all(
            isinstance(v, list) for v in columns_in.values()
        ):
            raise ReadError("'columns' must be an object mapping each column name to a list")
        lengths = {k: len(v) for k, v in columns_in.items()}
        if len(set(lengths.values())) > 1:
            common = max(set(lengths.values()), key=list(lengths.values()).count)
            raise ReadError(
                "the columns' lists differ in length",
                [
                    FileProblem(None, k, f"{n} values where the other columns have {common}")
                    for k, n in lengths.items()
                    if n != common
                ],
            )
        n_rows = next(iter(lengths.values()), 0)
        _check_limits(n_rows, len(columns_in), max_rows, max_columns)
        frame = pd.DataFrame({k: pd.Series(v, dtype=object) for k, v in columns_in.items()})
    else:
        if not isinstance(rows, list):
            raise ReadError("'rows' must be a list of row objects")
        not_objects = [i for i, t in enumerate(map(type, rows)) if t is not dict]
        if not_objects:
            raise ReadError(
                "each row must be an object {column: value}",
                [FileProblem(i + 1, None, "row is not an object") for i in not_objects[:20]],
            )
        _check_limits(len(rows), 0, max_rows, None)
        frame = pd.DataFrame.from_records(rows) if rows else pd.DataFrame()
        frame = frame.astype(object).where(frame.notna(), None) if len(frame) else frame
        _check_limits(len(frame), len(frame.columns), max_rows, max_columns)
    if len(frame) == 0 or len(frame.columns) == 0:
        raise ReadError("no data rows in the JSON file")
    out = pd.DataFrame({str(k): _json_column(str(k), frame[k]) for k in frame.columns})
    unknown = [k for k in units_in if k not in out.columns]
    meta = {str(k): _plain(v) for k, v in meta_in.items()}
    if unknown:
        meta["warnings"] = [f"'units' names columns not in the file: {', '.join(unknown)}"]
    return RawTable(
        format="json",
        columns=out,
        units={c: units_in.get(c) for c in out.columns},
        meta=meta,
        row_numbers=np.arange(1, len(out) + 1, dtype=np.int64),
    )


# --------------------------------------------------------------------------- entry point

# Control characters and lone UTF-16 surrogates (from JSON escapes): PostgreSQL
# cannot store U+0000 and no surrogate can be written as UTF-8, so such names are refused.
_UNSTORABLE = re.compile("[\x00-\x1f\x7f\ud800-\udfff]")


def _printable(text: str) -> str:
    """Text that can always be encoded as UTF-8 (lone surrogates become escapes)."""
    return text.encode("utf-8", "backslashreplace").decode("utf-8")


def _check_names(table: RawTable) -> None:
    bad = [str(c) for c in table.columns.columns if _UNSTORABLE.search(str(c))]
    if bad:
        raise ReadError(
            "column names may not hold control characters or unpaired surrogates",
            [
                FileProblem(None, _printable(name), "name holds a control character or surrogate")
                for name in bad[:20]
            ],
        )


_READERS: dict[str, Callable[[bytes, int | None, int | None], RawTable]] = {
    "csv": _read_csv,
    "ecsv": _read_ecsv,
    "votable": _read_votable,
    "fits": _read_fits,
    "json": _read_json,
}


def read_upload(
    data: bytes,
    *,
    filename: str | None = None,
    format: str | None = None,
    max_rows: int | None = None,
    max_columns: int | None = None,
) -> RawTable:
    """Read an uploaded file into a :class:`RawTable`.

    Parameters
    ----------
    data
        The file's bytes.
    filename
        The name the file was sent with; used only to guess the format.
    format
        One of :data:`FORMATS`; guessed with :func:`infer_format` when None.
    max_rows, max_columns
        Limits; a file over either is refused.

    Raises
    ------
    ReadError
        For any file that cannot be read as a table of the format, with the
        problems found (row numbers as the user counts them in the file).
    """
    fmt = (format or infer_format(data, filename)).strip().lower()
    if fmt not in FORMATS:
        raise ReadError(f"unknown format {format!r}; the formats are {', '.join(FORMATS)}")
    data = bytes(data)
    if not data or data.isspace():
        raise ReadError("the file is empty")
    try:
        table = _READERS[fmt](data, max_rows, max_columns)
        _check_names(table)
        return table
    except ReadError as exc:
        exc.message = _printable(exc.message)
        for p in exc.problems:
            p.message = _printable(p.message)
            p.column = _printable(p.column) if p.column is not None else None
        if fmt == "csv":
            exc.row_label = "line"
        looks = _content_format(data[:4096])
        if format and looks and looks != fmt:
            exc.message += f" (the content looks like {looks}, not {fmt})"
            exc.problems = [
                FileProblem(p.row, p.column, exc.message)
                if p.row is None and p.column is None
                else p
                for p in exc.problems
            ]
            exc.args = (exc.message,)
        raise


def _sliced(table: RawTable, chunk_rows: int) -> Iterator[RawTable]:
    for first in range(0, max(len(table), 1), chunk_rows):
        yield RawTable(
            format=table.format,
            columns=table.columns.iloc[first : first + chunk_rows].reset_index(drop=True),
            units=table.units,
            meta=table.meta,
            row_numbers=table.row_numbers[first : first + chunk_rows],
        )


def read_upload_chunks(
    data: bytes,
    *,
    filename: str | None = None,
    format: str | None = None,
    max_rows: int | None = None,
    max_columns: int | None = None,
    chunk_rows: int = 100_000,
) -> Iterator[RawTable]:
    """The file of :func:`read_upload` as tables of at most ``chunk_rows`` rows, in file order.

    Delimited text is planned on its first lines (encoding, delimiter, header,
    field counts), then checked (encoding, field counts, row limit) and parsed
    one run of lines at a time, so a caller can work on the first rows while the
    rest are read; other formats are read whole and sliced. Each piece keeps the
    file's row numbers. A piece's column types are inferred from its own rows,
    so a caller that finds a problem in a piece (a :class:`ReadError` here, or a
    row problem later) should read the file whole (:func:`read_upload`) to report
    it: that is the reference answer, and the pieces agree with it row for row
    whenever every piece is clean.
    """
    fmt = (format or infer_format(data, filename)).strip().lower()
    data = bytes(data)
    if fmt != "csv" or not data or data.isspace():
        table = read_upload(
            data, filename=filename, format=format, max_rows=max_rows, max_columns=max_columns
        )
        yield from _sliced(table, chunk_rows)
        return
    for piece in _csv_stream(data, max_rows, max_columns, chunk_rows):
        _check_names(piece)
        yield piece
