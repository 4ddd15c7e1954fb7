"""A Python client of the lcstore HTTP API, and a small command line.

It needs no Django and no settings: only httpx, astropy, numpy, tqdm (and
pandas for ``as_pandas=True``), so analysis scripts and contributors' machines
can use it on its own::

    from lcstore.client import Client

    with Client("https://lcstore.example.org", token) as lc:
        t = lc.lightcurve("tarn-7", bands=["r", "gamma"], unit="nufnu", bin="1d")
        lc.upload("night-0412.csv", source="tarn-7", band="r", instrument="hollow-hill-1m",
                  value_unit="mag", time_format="jd")

Shell users: ``python -m lcstore.client --help`` (``upload``, ``pull``,
``sources``, ``retract``, ``job``). The token is read from ``--token`` or
``LCSTORE_TOKEN``, the service address from ``--url`` or ``LCSTORE_URL``.

Every answer the server refuses raises :class:`LcstoreError` carrying the
server's own message and, for rejected uploads, its list of
``{row, column, message}``.
"""

from __future__ import annotations

import argparse
import datetime as dt
import io
import json
import os
import sys
import time
import uuid
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import IO, TYPE_CHECKING, Any
from urllib.parse import parse_qs, quote, urlsplit

import httpx
import numpy as np
from astropy.io import ascii as astropy_ascii
from astropy.table import Table
from astropy.time import Time
from astropy.utils import iers
from tqdm import tqdm

if TYPE_CHECKING:
    import pandas as pd

# astropy never reaches for the network from this module (the bundled tables suffice).
iers.conf.auto_download = False
iers.conf.auto_max_age = None

__all__ = [
    "CHUNK_SIZE",
    "Client",
    "DEFAULT_URL",
    "JobFailed",
    "LcstoreError",
    "Progress",
    "curve_time",
    "main",
]

DEFAULT_URL = "http://127.0.0.1:8000"
API_PATH = "/api/v1"
#: Bytes read from disk (and sent) per step of a streamed upload.
CHUNK_SIZE = 256 * 1024
USER_AGENT = "lcstore-client/1"

#: ``progress`` arguments: a tqdm bar (True), silence (False), or a callable
#: receiving ``(done, total)`` after every step (bytes for uploads, percent for jobs).
Progress = bool | Callable[[float, float], None]

ParamValue = str | int | float | bool | Sequence[Any] | dt.datetime | dt.date | None


class LcstoreError(Exception):
    """The server refused a request, or could not be reached.

    Attributes
    ----------
    status : int or None
        HTTP status of the answer; None when no answer arrived.
    message : str
        The server's human-readable ``detail`` message.
    errors : list of dict
        For rejected uploads, every ``{row, column, message}`` the server found.
    body : object
        The decoded JSON answer (None if the answer was not JSON).
    """

    def __init__(
        self,
        status: int | None,
        message: str,
        errors: list[dict[str, Any]] | None = None,
        *,
        body: Any = None,
    ) -> None:
        self.status = status
        self.message = message
        self.errors = list(errors or [])
        self.body = body
        super().__init__(status, message, self.errors)

    def __str__(self) -> str:
        head = f"HTTP {self.status}: {self.message}" if self.status else self.message
        shown = 20
        lines = [head] + [
            f"  row {e.get('row')}, column {e.get('column')}: {e.get('message')}"
            for e in self.errors[:shown]
        ]
        if len(self.errors) > shown:
            lines.append(f"  ... and {len(self.errors) - shown} more")
        if isinstance(self.body, dict) and self.body.get("errors_truncated"):
            lines.append(f"  (the server lists the first of {self.body.get('n_errors')} problems)")
        return "\n".join(lines)


class JobFailed(LcstoreError):
    """A background job ended in state ``failed``; ``job`` is its last record."""

    def __init__(self, job: Mapping[str, Any]) -> None:
        self.job = dict(job)
        error = str(job.get("error") or "no reason given").strip()
        super().__init__(None, f"job {job.get('id')} failed: {error}", body=self.job)


# -- small helpers ---------------------------------------------------------------------------


def _slug(source: str | Mapping[str, Any]) -> str:
    """A source given as its slug or as a record from :meth:`Client.sources`."""
    value = source["slug"] if isinstance(source, Mapping) else source
    return quote(str(value), safe="")


def _param(value: ParamValue) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, dt.datetime | dt.date):
        return value.isoformat()
    if isinstance(value, str):
        return value
    if isinstance(value, Sequence):
        return ",".join(str(v) for v in value)
    return str(value)


def _params(**kw: ParamValue) -> dict[str, str]:
    return {k: _param(v) for k, v in kw.items() if v is not None}


def _bin_param(value: str | float | dt.timedelta | None) -> str | None:
    if value is None:
        return None
    if isinstance(value, dt.timedelta):
        return f"{value.total_seconds():g}s"
    return str(value)


def _limits_param(value: str | bool | None) -> str | None:
    if isinstance(value, bool):
        return "include" if value else "exclude"
    return value


def _job_id_from(response: httpx.Response, body: Mapping[str, Any]) -> str:
    if body.get("id"):
        return str(body["id"])
    location = response.headers.get("Location", "")
    parts = [p for p in urlsplit(location).path.split("/") if p]
    if not parts:
        raise LcstoreError(response.status_code, "the server accepted a job but named no job id")
    return parts[-1]


def _error_from(response: httpx.Response) -> LcstoreError:
    """The server's refusal as an exception: its ``detail`` and, for uploads, ``errors``."""
    body: Any = None
    try:
        body = response.json()
    except (ValueError, UnicodeDecodeError):
        body = None
    errors: list[dict[str, Any]] = []
    message = ""
    if isinstance(body, dict):
        message = str(body.get("detail") or "")
        if isinstance(body.get("errors"), list):
            errors = [e for e in body["errors"] if isinstance(e, dict)]
        if not message:
            message = "; ".join(f"{k}: {v}" for k, v in body.items())
    if not message:
        request = response.request
        message = f"{response.reason_phrase or 'error'} ({request.method} {request.url})"
    return LcstoreError(response.status_code, message, errors, body=body)


@contextmanager
def _reporter(
    progress: Progress, *, total: float, desc: str, unit: str, scale: bool
) -> Iterator[Callable[[float], None]]:
    """Yield ``report(done)``: drives a tqdm bar, a caller's callable, or nothing."""
    if callable(progress):
        callback = progress

        def report_to_callable(done: float) -> None:
            callback(done, total)

        yield report_to_callable
        return
    bar = tqdm(
        total=total,
        desc=desc,
        unit=unit,
        unit_scale=scale,
        unit_divisor=1024 if scale else 1000,
        disable=not progress,
        leave=True,
    )

    def report_to_bar(done: float) -> None:
        bar.update(done - bar.n)

    try:
        yield report_to_bar
    finally:
        bar.close()


class _MultipartBody:
    """multipart/form-data (RFC 7578) produced piece by piece, the file read in chunks.

    The body length is known in advance (fields + file size), so it is sent
    with a Content-Length and never held in memory whole.
    """

    def __init__(
        self, fields: Sequence[tuple[str, str]], *, file_path: Path, file_name: str
    ) -> None:
        self.boundary = f"lcstore-{uuid.uuid4().hex}"
        self.path = file_path
        self.size = file_path.stat().st_size
        b = self.boundary
        head = b"".join(
            f'--{b}\r\nContent-Disposition: form-data; name="{_quote(name)}"\r\n\r\n'.encode()
            + value.encode("utf-8")
            + b"\r\n"
            for name, value in fields
        )
        self.head = (
            head
            + (
                f'--{b}\r\nContent-Disposition: form-data; name="file"; '
                f'filename="{_quote(file_name)}"\r\n'
                "Content-Type: application/octet-stream\r\n\r\n"
            ).encode()
        )
        self.tail = f"\r\n--{b}--\r\n".encode()

    @property
    def content_type(self) -> str:
        return f"multipart/form-data; boundary={self.boundary}"

    @property
    def length(self) -> int:
        return len(self.head) + self.size + len(self.tail)

    def chunks(
        self, report: Callable[[float], None], chunk_size: int | None = None
    ) -> Iterator[bytes]:
        step = chunk_size or CHUNK_SIZE
        yield self.head
        sent = 0
        with self.path.open("rb") as f:
            while sent < self.size:
                chunk = f.read(min(step, self.size - sent))
                if not chunk:
                    raise LcstoreError(None, f"{self.path} became shorter while it was sent")
                sent += len(chunk)
                yield chunk
                report(sent)
        yield self.tail


def _quote(text: str) -> str:
    """A form-data name or file name inside double quotes (the HTML form escapes)."""
    return text.replace("\\", "\\\\").replace('"', "%22").replace("\r", "%0D").replace("\n", "%0A")


def _form_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, dt.datetime | dt.date):
        return value.isoformat()
    if isinstance(value, Mapping | list | tuple):
        return json.dumps(value)
    return str(value)


def curve_time(curve: Table | pd.DataFrame, column: str = "time") -> Time:
    """A time column of a pulled curve as an astropy Time (TDB).

    The store serves times in TDB at the solar-system barycentre (BJD_TDB,
    Eastman, Siverd & Gaudi 2010); the Time object carries the scale and the
    format, the barycentric reference is in the table's ``TREFPOS`` meta.

    Parameters
    ----------
    curve : astropy.table.Table or pandas.DataFrame
        An answer of :meth:`Client.lightcurve` (a DataFrame keeps the meta in
        ``attrs["meta"]``).
    column : str
        ``time``, ``time_lo`` or ``time_hi``.
    """
    meta = curve.meta if isinstance(curve, Table) else curve.attrs.get("meta", {})
    fmt = str(meta.get("time_format", "mjd"))
    scale = str(meta.get("TIMESYS", "TDB")).lower()
    values = np.asarray(curve[column])
    if fmt == "isot":
        return Time(values.astype(str), format="isot", scale=scale)
    return Time(values.astype(float), format=fmt, scale=scale)


# -- the client ------------------------------------------------------------------------------


class Client:
    """Talk to one lcstore service.

    Parameters
    ----------
    url : str
        The service address (``https://host``) or its API root (``…/api/v1``).
    token : str or None
        An API token (``manage.py drf_create_token``); None for a service with
        public read.
    timeout : float
        Seconds to wait for the network (connect, each read and write).
    transport : httpx.BaseTransport, optional
        For tests and special networks (e.g. ``httpx.MockTransport``).
    """

    def __init__(
        self,
        url: str = DEFAULT_URL,
        token: str | None = None,
        *,
        timeout: float = 60,
        transport: httpx.BaseTransport | None = None,
    ) -> None:
        base = url.rstrip("/")
        if not base.endswith(API_PATH):
            base += API_PATH
        self.base_url = base + "/"
        headers = {"Accept": "application/json", "User-Agent": USER_AGENT}
        if token:
            headers["Authorization"] = f"Token {token}"
        self._http = httpx.Client(
            base_url=self.base_url, headers=headers, timeout=timeout, transport=transport
        )

    def close(self) -> None:
        self._http.close()

    def __enter__(self) -> Client:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # -- plumbing --

    def _send(self, method: str, path: str, **kw: Any) -> httpx.Response:
        try:
            response = self._http.request(method, path, **kw)
        except httpx.TransportError as exc:
            raise LcstoreError(None, f"could not talk to {self.base_url}: {exc}") from exc
        if response.status_code >= 400:
            raise _error_from(response)
        return response

    def _json(self, method: str, path: str, **kw: Any) -> Any:
        return self._send(method, path, **kw).json()

    def _paged(self, path: str, params: dict[str, str]) -> list[dict[str, Any]]:
        """All records of a paginated list (the next page asked on the same path)."""
        out: list[dict[str, Any]] = []
        params = dict(params)
        while True:
            body = self._json("GET", path, params=params)
            if isinstance(body, list):
                return out + body
            out.extend(body.get("results", []))
            nxt = body.get("next")
            if not nxt:
                return out
            page = parse_qs(urlsplit(nxt).query).get("page")
            if not page:
                return out
            params["page"] = page[0]

    # -- catalogue --

    def sources(
        self,
        q: str | None = None,
        ra: float | None = None,
        dec: float | None = None,
        radius: float | None = None,
    ) -> list[dict[str, Any]]:
        """Sources by name or alias (``q``) or in a cone (``ra``, ``dec``, ``radius``, deg ICRS)."""
        return self._paged("sources/", _params(q=q, ra=ra, dec=dec, radius=radius, page_size=1000))

    def source(self, slug: str) -> dict[str, Any]:
        return self._json("GET", f"sources/{_slug(slug)}/")

    def bands(self) -> list[dict[str, Any]]:
        return self._paged("bands/", _params(page_size=1000))

    def instruments(self) -> list[dict[str, Any]]:
        return self._paged("instruments/", _params(page_size=1000))

    # -- light curves --

    @staticmethod
    def _curve_params(
        *,
        bands: str | Sequence[str] | None,
        instruments: str | Sequence[str] | None,
        unit: str | Sequence[str] | None,
        bin: str | float | dt.timedelta | None,
        start: float | None,
        end: float | None,
        time_format: str,
        upper_limits: str | bool | None,
        deredden: bool | None,
        host: bool | None,
        as_of: str | dt.datetime | None,
        extra: Mapping[str, ParamValue],
    ) -> dict[str, str]:
        return _params(
            bands=bands,
            instruments=instruments,
            unit=unit,
            bin=_bin_param(bin),
            start=start,
            end=end,
            time_format=time_format,
            upper_limits=_limits_param(upper_limits),
            deredden=deredden,
            host=host,
            as_of=as_of,
            **extra,
        )

    def lightcurve(
        self,
        source: str | Mapping[str, Any],
        *,
        bands: str | Sequence[str] | None = None,
        instruments: str | Sequence[str] | None = None,
        unit: str | Sequence[str] | None = None,
        bin: str | float | dt.timedelta | None = None,
        start: float | None = None,
        end: float | None = None,
        time_format: str = "mjd",
        upper_limits: str | bool | None = None,
        deredden: bool | None = None,
        host: bool | None = None,
        as_of: str | dt.datetime | None = None,
        as_pandas: bool = False,
        **extra: ParamValue,
    ) -> Table | pd.DataFrame:
        """A source's curve: points (or bins) of the bands asked, in the unit asked.

        Read from the server's ECSV answer, so the columns keep their units
        and the table its time metadata (``TIMESYS``, ``TREFPOS``,
        ``time_format``) and ``source``, ``band_units``, ``uploads``. With
        several units (a comma list) the ``value`` column has none and
        ``meta["band_units"]`` names each band's.

        Parameters are those of ``sources/{slug}/lightcurve/`` (DESIGN.md §4):
        ``bands``, ``instruments`` and ``unit`` take a list or a comma string;
        ``bin`` a width (``"1d"``, ``"6h"``, a number of days, a timedelta) or
        ``"blocks"``; ``start``/``end`` MJD (TDB, barycentric); ``as_of`` an
        instant. Others (``origin``, ``p0``, ``extinction_law``, ``r_v``) go
        through ``extra``.

        Returns
        -------
        astropy.table.Table, or pandas.DataFrame with ``as_pandas=True``
            (``attrs["meta"]`` and ``attrs["units"]`` keep what the Table had).
        """
        params = self._curve_params(
            bands=bands,
            instruments=instruments,
            unit=unit,
            bin=bin,
            start=start,
            end=end,
            time_format=time_format,
            upper_limits=upper_limits,
            deredden=deredden,
            host=host,
            as_of=as_of,
            extra=extra,
        )
        params["format"] = "ecsv"
        response = self._send(
            "GET",
            f"sources/{_slug(source)}/lightcurve/",
            params=params,
            headers={"Accept": "text/x-ecsv, application/json;q=0.5"},
        )
        table = astropy_ascii.read(response.text, format="ecsv")
        if not as_pandas:
            return table
        frame = table.to_pandas()
        frame.attrs["meta"] = dict(table.meta)
        frame.attrs["units"] = {c: str(table[c].unit) for c in table.colnames if table[c].unit}
        return frame

    def lightcurve_file(
        self,
        source: str | Mapping[str, Any],
        dest: str | os.PathLike[str] | IO[bytes],
        *,
        format: str = "csv",
        bands: str | Sequence[str] | None = None,
        instruments: str | Sequence[str] | None = None,
        unit: str | Sequence[str] | None = None,
        bin: str | float | dt.timedelta | None = None,
        start: float | None = None,
        end: float | None = None,
        time_format: str = "mjd",
        upper_limits: str | bool | None = None,
        deredden: bool | None = None,
        host: bool | None = None,
        as_of: str | dt.datetime | None = None,
        **extra: ParamValue,
    ) -> int:
        """Save the server's rendering (csv, ecsv, votable or json) of a curve, streamed.

        Returns the number of bytes written.
        """
        params = self._curve_params(
            bands=bands,
            instruments=instruments,
            unit=unit,
            bin=bin,
            start=start,
            end=end,
            time_format=time_format,
            upper_limits=upper_limits,
            deredden=deredden,
            host=host,
            as_of=as_of,
            extra=extra,
        )
        params["format"] = format
        path = f"sources/{_slug(source)}/lightcurve/"
        try:
            with self._http.stream(
                "GET", path, params=params, headers={"Accept": "*/*"}
            ) as response:
                if response.status_code >= 400:
                    response.read()
                    raise _error_from(response)
                if isinstance(dest, str | os.PathLike):
                    with open(dest, "wb") as f:
                        return _copy(response, f)
                return _copy(response, dest)
        except httpx.TransportError as exc:
            raise LcstoreError(None, f"could not talk to {self.base_url}: {exc}") from exc

    # -- computed summaries --

    def _computed(
        self, source: str | Mapping[str, Any], name: str, params: dict[str, str]
    ) -> dict[str, Any]:
        return self._json("GET", f"sources/{_slug(source)}/{name}/", params=params)

    def _background(
        self,
        kind: str,
        source: str | Mapping[str, Any],
        params: dict[str, str],
        *,
        progress: Progress,
        poll: float,
    ) -> dict[str, Any]:
        job = self.submit_job(kind, source, **params)
        return self.wait(job["id"], poll=poll, progress=progress)["result"]

    def sed(
        self,
        source: str | Mapping[str, Any],
        at: float,
        window: float = 1.0,
        *,
        bands: str | Sequence[str] | None = None,
        deredden: bool | None = None,
        as_of: str | dt.datetime | None = None,
        **params: ParamValue,
    ) -> dict[str, Any]:
        """νF_ν per band from points within ``window`` days around MJD ``at`` (TDB)."""
        p = _params(at=at, window=window, bands=bands, deredden=deredden, as_of=as_of, **params)
        return self._computed(source, "sed", p)

    def correlation(
        self,
        source: str | Mapping[str, Any],
        x: str,
        y: str,
        *,
        background: bool = False,
        progress: Progress = True,
        poll: float = 1.0,
        **params: ParamValue,
    ) -> dict[str, Any]:
        """Flux–flux correlation of bands x and y (``bin``, ``max_separation``, ``n_boot``…).

        With ``background=True`` it runs as a job (``POST jobs/``), polled every
        ``poll`` seconds with a progress bar, and the result is returned once
        the job is done.
        """
        p = _params(x=x, y=y, **params)
        if background:
            return self._background("correlation", source, p, progress=progress, poll=poll)
        return self._computed(source, "correlation", p)

    def lags(
        self,
        source: str | Mapping[str, Any],
        x: str,
        y: str,
        method: str = "dcf",
        *,
        background: bool = False,
        progress: Progress = True,
        poll: float = 1.0,
        **params: ParamValue,
    ) -> dict[str, Any]:
        """Lag function of y against x (positive lag: y lags behind x).

        ``params``: ``lag_min``, ``lag_max``, ``lag_step``, ``local``, ``bin``,
        ``n_sim``, ``n_sig``, ``seed``… With ``background=True`` (many
        simulations) it runs as a job, polled every ``poll`` seconds with a
        progress bar.
        """
        p = _params(x=x, y=y, method=method, **params)
        if background:
            return self._background("lags", source, p, progress=progress, poll=poll)
        return self._computed(source, "lags", p)

    def variability(
        self,
        source: str | Mapping[str, Any],
        bands: str | Sequence[str] | None = None,
        **params: ParamValue,
    ) -> dict[str, Any]:
        """Per-band n, mean, F_var with its error, chi-square against a constant."""
        return self._computed(source, "variability", _params(bands=bands, **params))

    # -- uploads --

    def upload(
        self,
        path: str | os.PathLike[str],
        *,
        source: str | None = None,
        band: str | None = None,
        instrument: str,
        progress: Progress = True,
        **fields: Any,
    ) -> dict[str, Any]:
        """Send a file to ``uploads/``, streamed from disk, with a progress bar.

        ``fields`` are the other form fields of DESIGN.md §4: ``format``,
        ``columns`` (a dict), ``value_unit``, ``time_format``, ``time_scale``,
        ``time_reference``, ``met_epoch``, ``reduction``, ``reference``,
        ``embargo_until``, ``supersedes``. ``progress``: True for a tqdm bar on
        stderr, False for none, or a callable ``(bytes_sent, total)``.

        Returns the upload record (id, counts, time range, warnings). A refused
        file raises :class:`LcstoreError` with every row problem in ``errors``.
        """
        file_path = Path(path)
        form = [
            (k, _form_value(v))
            for k, v in {"source": source, "band": band, "instrument": instrument, **fields}.items()
            if v is not None
        ]
        body = _MultipartBody(form, file_path=file_path, file_name=file_path.name)
        headers = {"Content-Type": body.content_type, "Content-Length": str(body.length)}
        with _reporter(
            progress, total=body.size, desc=file_path.name, unit="B", scale=True
        ) as report:
            return self._json("POST", "uploads/", content=body.chunks(report), headers=headers)

    def uploads(self, **filters: ParamValue) -> list[dict[str, Any]]:
        """Upload records (filters: ``source``, ``band``, ``instrument``, ``uploader``, ``status``)."""
        return self._paged("uploads/", _params(page_size=1000, **filters))

    def upload_record(self, upload_id: int) -> dict[str, Any]:
        return self._json("GET", f"uploads/{int(upload_id)}/")

    def retract(self, upload_id: int, reason: str) -> dict[str, Any]:
        """Retract an upload (its points disappear from answers, ``as_of`` still sees them)."""
        return self._json("POST", f"uploads/{int(upload_id)}/retract/", json={"reason": reason})

    # -- background jobs --

    def submit_job(self, kind: str, source: str | Mapping[str, Any], **parameters: Any) -> dict:
        """Queue a background computation (``POST jobs/``, answered 202 + Location)."""
        payload = {
            "kind": kind,
            "source": source["slug"] if isinstance(source, Mapping) else source,
            "parameters": parameters,
        }
        response = self._send("POST", "jobs/", json=payload)
        body = response.json() if response.content else {}
        body["id"] = _job_id_from(response, body)
        return body

    def job(self, job_id: str | Mapping[str, Any]) -> dict[str, Any]:
        """A job's record: ``state`` (queued, running, done, failed), ``progress`` (0–1), …"""
        jid = job_id["id"] if isinstance(job_id, Mapping) else job_id
        return self._json("GET", f"jobs/{quote(str(jid), safe='')}/")

    def wait(
        self,
        job_id: str | Mapping[str, Any],
        poll: float = 1.0,
        timeout: float | None = None,
        progress: Progress = True,
    ) -> dict[str, Any]:
        """Poll ``jobs/{id}/`` until it is done; show its progress.

        Returns the final job record (``result`` holds the answer). Raises
        :class:`JobFailed` when the job failed and ``TimeoutError`` when it is
        still running after ``timeout`` seconds.
        """
        jid = str(job_id["id"] if isinstance(job_id, Mapping) else job_id)
        deadline = None if timeout is None else time.monotonic() + timeout
        with _reporter(progress, total=100, desc=f"job {jid[:8]}", unit="%", scale=False) as report:
            while True:
                job = self.job(jid)
                fraction = float(job.get("progress") or 0.0)
                state = job.get("state")
                if state == "done":
                    fraction = 1.0
                report(round(100 * min(max(fraction, 0.0), 1.0), 1))
                if state == "done":
                    return job
                if state == "failed":
                    raise JobFailed(job)
                if deadline is not None and time.monotonic() >= deadline:
                    raise TimeoutError(f"job {jid} is still {state} after {timeout:g} s")
                time.sleep(poll)


def _copy(response: httpx.Response, f: IO[bytes]) -> int:
    n = 0
    for chunk in response.iter_bytes():
        f.write(chunk)
        n += len(chunk)
    return n


# -- command line ----------------------------------------------------------------------------


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="python -m lcstore.client",
        description="Upload photometry to an lcstore service and pull light curves from it.",
    )
    p.add_argument("--url", default=None, help=f"service address (LCSTORE_URL, {DEFAULT_URL})")
    p.add_argument("--token", default=None, help="API token (default: LCSTORE_TOKEN)")
    p.add_argument("--timeout", type=float, default=60.0, help="network timeout, s")
    sub = p.add_subparsers(dest="command", required=True)

    up = sub.add_parser("upload", help="send a file of photometry")
    up.add_argument("file", type=Path)
    up.add_argument("--instrument", required=True, help="instrument slug")
    up.add_argument("--source", help="source slug (or a source column in the file)")
    up.add_argument("--band", help="band slug (or a band column in the file)")
    up.add_argument("--format", choices=["csv", "ecsv", "votable", "fits", "json"])
    up.add_argument("--columns", help='JSON: role -> column, e.g. {"time": "BJD"}')
    up.add_argument("--value-unit", help="astropy unit, mag (band system) or ABmag")
    up.add_argument("--time-format", choices=["mjd", "jd", "isot", "unix", "decimalyear", "met"])
    up.add_argument("--time-scale", choices=["utc", "tt", "tai", "tdb"])
    up.add_argument(
        "--time-reference", choices=["TOPOCENTER", "GEOCENTER", "HELIOCENTER", "BARYCENTER"]
    )
    up.add_argument("--met-epoch", type=float, help="MJD of MET zero (time format met)")
    up.add_argument("--reduction", help="how the photometry was reduced")
    up.add_argument("--reference", help="publication or note to cite")
    up.add_argument("--embargo-until", help="ISO 8601 instant")
    up.add_argument("--supersedes", type=int, help="id of the upload this one replaces")
    up.add_argument("--no-progress", action="store_true", help="no progress bar")

    pull = sub.add_parser("pull", help="save a light curve")
    pull.add_argument("source", help="source slug")
    pull.add_argument("--bands", help="comma list of band slugs")
    pull.add_argument("--instruments", help="comma list of instrument slugs")
    pull.add_argument("--unit", help="e.g. mJy, nufnu, ABmag, mag, or one per band")
    pull.add_argument("--bin", help="1d, 6h, 3600s, days, or blocks")
    pull.add_argument("--start", type=float, help="MJD (TDB)")
    pull.add_argument("--end", type=float, help="MJD (TDB)")
    pull.add_argument("--time-format", choices=["mjd", "jd", "isot"], default="mjd")
    pull.add_argument("--upper-limits", choices=["include", "exclude"])
    pull.add_argument("--deredden", action="store_true", help="correct Galactic extinction")
    pull.add_argument("--host", action="store_true", help="subtract the host-galaxy flux")
    pull.add_argument("--as-of", help="ISO 8601 instant: the store as it was then")
    pull.add_argument("--format", choices=["csv", "ecsv", "votable", "json"], default="csv")
    pull.add_argument("-o", "--output", type=Path, help="file to write (default: stdout)")

    src = sub.add_parser("sources", help="list or search sources")
    src.add_argument("--q", help="name or alias")
    src.add_argument("--ra", type=float)
    src.add_argument("--dec", type=float)
    src.add_argument("--radius", type=float, help="cone radius, deg")

    ret = sub.add_parser("retract", help="retract an upload")
    ret.add_argument("upload", type=int)
    ret.add_argument("--reason", required=True)

    job = sub.add_parser("job", help="show (or wait for) a background job")
    job.add_argument("id")
    job.add_argument("--wait", action="store_true", help="poll until it is done")
    job.add_argument("--poll", type=float, default=1.0, help="seconds between polls")
    return p


def _print_json(data: Any, out: IO[str]) -> None:
    json.dump(data, out, indent=2, default=str)
    out.write("\n")


def main(argv: Sequence[str] | None = None) -> int:
    """The command line; returns the exit status (0 ok, 1 refused, 2 usage)."""
    args = _parser().parse_args(argv)
    url = args.url or os.environ.get("LCSTORE_URL") or DEFAULT_URL
    token = args.token or os.environ.get("LCSTORE_TOKEN") or None
    out, err = sys.stdout, sys.stderr
    try:
        with Client(url, token, timeout=args.timeout) as client:
            if args.command == "upload":
                fields = {
                    k: getattr(args, k)
                    for k in (
                        "format",
                        "value_unit",
                        "time_format",
                        "time_scale",
                        "time_reference",
                        "met_epoch",
                        "reduction",
                        "reference",
                        "embargo_until",
                        "supersedes",
                        "columns",
                    )
                    if getattr(args, k) is not None
                }
                record = client.upload(
                    args.file,
                    source=args.source,
                    band=args.band,
                    instrument=args.instrument,
                    progress=not args.no_progress,
                    **fields,
                )
                counts = record.get("counts", {})
                err.write(
                    f"upload {record.get('id')} accepted: {counts.get('points')} points "
                    f"({counts.get('upper_limits')} upper limits)\n"
                )
                for w in record.get("warnings") or []:
                    err.write(f"warning: {w}\n")
                _print_json(record, out)
            elif args.command == "pull":
                params = {
                    "bands": args.bands,
                    "instruments": args.instruments,
                    "unit": args.unit,
                    "bin": args.bin,
                    "start": args.start,
                    "end": args.end,
                    "time_format": args.time_format,
                    "upper_limits": args.upper_limits,
                    "deredden": args.deredden or None,
                    "host": args.host or None,
                    "as_of": args.as_of,
                }
                if args.output:
                    n = client.lightcurve_file(
                        args.source, args.output, format=args.format, **params
                    )
                    err.write(f"wrote {n} bytes to {args.output}\n")
                elif getattr(out, "buffer", None) is not None:
                    client.lightcurve_file(args.source, out.buffer, format=args.format, **params)
                else:  # stdout replaced by a text stream
                    buf = io.BytesIO()
                    client.lightcurve_file(args.source, buf, format=args.format, **params)
                    out.write(buf.getvalue().decode("utf-8"))
            elif args.command == "sources":
                _print_json(client.sources(args.q, args.ra, args.dec, args.radius), out)
            elif args.command == "retract":
                _print_json(client.retract(args.upload, args.reason), out)
            elif args.command == "job":
                record = client.wait(args.id, poll=args.poll) if args.wait else client.job(args.id)
                _print_json(record, out)
    except LcstoreError as exc:
        err.write(f"error: {exc}\n")
        return 1
    except (OSError, TimeoutError) as exc:
        err.write(f"error: {exc}\n")
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
