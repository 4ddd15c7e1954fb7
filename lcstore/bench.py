"""Helpers of the benchmark harness ``manage.py lcbench`` (never imported by the service).

Everything here is plumbing for measuring: synthetic curves and their CSV
files, an independent binary COPY encoder for the reference loads, a gunicorn
server on a loopback port that is always stopped, timed HTTP calls, a bounded
load generator (wrk, or threads with httpx), machine facts and the report
table. Nothing here is used by requests to the service.
"""

from __future__ import annotations

import io
import os
import platform
import re
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import httpx
import numpy as np
import pandas as pd

__all__ = [
    "COPY_HEADER",
    "COPY_TRAILER",
    "LoadResult",
    "Row",
    "Server",
    "Timing",
    "best_of",
    "chunked",
    "copy_chunk",
    "curve_arrays",
    "curve_csv",
    "format_table",
    "free_port",
    "lagged_pair",
    "loadavg_text",
    "median_lag_tied",
    "machine_facts",
    "python_load",
    "seconds_text",
    "server_timing",
    "timed_get",
    "timed_upload",
    "wrk_load",
]

# ----------------------------------------------------------------------------- timing


@dataclass(frozen=True)
class Timing:
    """Best (smallest) wall time of ``runs`` repeats, seconds, and every run."""

    best: float
    runs: tuple[float, ...]

    @property
    def n(self) -> int:
        return len(self.runs)


def best_of(fn: Callable[[], Any], repeats: int, *, warmup: int = 0) -> Timing:
    """Call ``fn`` ``warmup`` times untimed, then ``repeats`` times timed."""
    for _ in range(warmup):
        fn()
    runs = []
    for _ in range(max(1, repeats)):
        t0 = time.perf_counter()
        fn()
        runs.append(time.perf_counter() - t0)
    return Timing(min(runs), tuple(runs))


# ----------------------------------------------------------------------------- data


def curve_arrays(
    n: int, *, seed: int, t_start: float = 58000.0, span_days: float = 2700.0
) -> dict[str, np.ndarray]:
    """``n`` points of one curve, times uniform over ``span_days`` (sorted), as in a file.

    Values are positive flux densities (mJy) with a slow modulation and
    noise; errors are 0.05–0.10 mJy. Rounded as they are written to the CSV
    (6 decimals), so the arrays equal what the server reads back.
    """
    rng = np.random.default_rng(seed)
    t = np.round(np.sort(rng.uniform(t_start, t_start + span_days, n)), 6)
    value = np.round(
        10.0 + 3.0 * np.sin(2 * np.pi * (t - t_start) / 400.0) + rng.normal(0.0, 0.3, n), 6
    )
    error = np.round(0.05 + 0.05 * rng.random(n), 6)
    return {"time": t, "value": value, "error": error}


def curve_csv(arrays: dict[str, np.ndarray]) -> bytes:
    """The CSV file a contributor would send: ``time,value,error`` with a header."""
    buf = io.StringIO()
    pd.DataFrame(arrays).to_csv(buf, index=False, float_format="%.6f", lineterminator="\n")
    return buf.getvalue().encode()


def lagged_pair(
    n: int, *, seed: int, span_days: float = 2700.0, lag_days: float = 5.0, dyadic: bool = False
) -> tuple[np.ndarray, ...]:
    """Two unevenly sampled red-noise curves, b lagging a by ``lag_days``.

    ``dyadic`` puts the times on a 2^-12-day grid with no repeated time stamps:
    times and lags below 4096 d are then exact in float32, as the pyzdcf
    oracle stores lags.
    """
    from lcstore.science.simulate import red_noise

    rng = np.random.default_rng(seed)
    step = 0.25
    grid = np.arange(-50.0, span_days + 50.0, step)
    signal_ = red_noise(grid.size, step, 2.0, rng=rng, mean=10.0, std=2.0)

    def times() -> np.ndarray:
        if dyadic:
            cells = rng.choice(int(span_days * 4096), size=n, replace=False)
            return np.sort(cells / 4096.0)
        return np.sort(rng.uniform(0.0, span_days, n))

    ta, tb = times(), times()
    a = np.interp(ta, grid, signal_) + rng.normal(0.0, 0.1, n)
    b = np.interp(tb - lag_days, grid, signal_) + rng.normal(0.0, 0.1, n)
    e = np.full(n, 0.1)
    return ta, a, e, tb, b, e.copy()


def median_lag_tied(ta: np.ndarray, tb: np.ndarray) -> bool:
    """Whether the median of the non-zero pair lags tb_j - ta_i is shared by two pairs.

    Both ZDCF programs start binning at the median pair (npp // 2); when that
    lag is tied, which tied pairs fall on either side depends on how each
    program orders equal lags (pyzdcf: an unstable heapsort), so the two
    bins at the median can hold different pairs.
    """
    dt = (tb[None, :] - ta[:, None]).ravel()
    dt = np.sort(dt[dt != 0])
    mid = dt.size // 2
    return bool(dt.size > 1 and dt[mid - 1] == dt[mid])


# ----------------------------------------------------------------------------- binary COPY

#: PostgreSQL binary COPY header (signature, flags, extension length) and trailer
#: (PostgreSQL documentation, "COPY — Binary Format").
COPY_HEADER = b"PGCOPY\n\xff\r\n\x00" + bytes(8)
COPY_TRAILER = b"\xff\xff"

_WIRE = {"int8": ">i8", "float8": ">f8", "bool": "?"}


def copy_chunk(columns: Sequence[tuple[str, np.ndarray | None]]) -> bytes:
    """Binary COPY tuples for rows whose columns are all non-NULL or all NULL.

    ``columns`` holds ``(pg_type, values)`` pairs; ``values`` None makes the
    column NULL in every row. Written independently of the service's encoder,
    so the reference loads do not depend on the code they are compared with.
    """
    fields: list[tuple[str, str]] = [("count", ">i2")]
    n = next(len(v) for _, v in columns if v is not None)
    for i, (pg_type, values) in enumerate(columns):
        fields.append((f"len{i}", ">i4"))
        if values is not None:
            fields.append((f"v{i}", _WIRE[pg_type]))
    rec = np.empty(n, dtype=np.dtype(fields))
    rec["count"] = len(columns)
    for i, (pg_type, values) in enumerate(columns):
        if values is None:
            rec[f"len{i}"] = -1
        else:
            rec[f"len{i}"] = np.dtype(_WIRE[pg_type]).itemsize
            rec[f"v{i}"] = values
    return rec.tobytes()


# ----------------------------------------------------------------------------- server


def free_port() -> int:
    """A TCP port that was free on 127.0.0.1 a moment ago."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class Server:
    """gunicorn serving lcstore on a free loopback port, in its own process group.

    Use as a context manager: the whole group (master and workers) is sent
    SIGTERM on exit, then SIGKILL if it has not gone within a few seconds.
    """

    def __init__(self, *, base_dir: Path, env: dict[str, str], workers: int, timeout_s: int = 1800):
        self.base_dir = base_dir
        self.env = env
        self.workers = workers
        self.timeout_s = timeout_s
        self.port = free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.proc: subprocess.Popen[bytes] | None = None
        self.log = tempfile.NamedTemporaryFile(prefix="lcbench-gunicorn-", suffix=".log")

    def __enter__(self) -> Server:
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()

    def start(self) -> None:
        cmd = [
            sys.executable,
            "-m",
            "gunicorn",
            "lcstore.wsgi:application",
            "--bind",
            f"127.0.0.1:{self.port}",
            "--workers",
            str(self.workers),
            "--timeout",
            str(self.timeout_s),
            "--graceful-timeout",
            "5",
            "--log-level",
            "warning",
            "--chdir",
            str(self.base_dir),
        ]
        if Path("/dev/shm").is_dir():
            cmd += ["--worker-tmp-dir", "/dev/shm"]
        self.proc = subprocess.Popen(
            cmd,
            env=self.env,
            cwd=self.base_dir,
            stdout=self.log,
            stderr=subprocess.STDOUT,
            stdin=subprocess.DEVNULL,
            start_new_session=True,
        )
        deadline = time.monotonic() + 90.0
        with httpx.Client(timeout=2.0, trust_env=False) as client:
            while time.monotonic() < deadline:
                if self.proc.poll() is not None:
                    raise RuntimeError(f"gunicorn exited at start:\n{self.log_tail()}")
                try:
                    client.get(self.url + "/api/v1/")
                    return
                except httpx.TransportError:
                    time.sleep(0.2)
        self.stop()
        raise RuntimeError(f"gunicorn did not answer within 90 s:\n{self.log_tail()}")

    def worker_pids(self) -> list[int]:
        """Process ids of the workers (children of the master)."""
        if self.proc is None:
            return []
        try:
            out = subprocess.run(
                ["ps", "-o", "pid=", "--ppid", str(self.proc.pid)],
                capture_output=True,
                text=True,
                timeout=10,
            ).stdout
        except (OSError, subprocess.SubprocessError):
            return []
        return [int(p) for p in out.split()]

    def stop(self) -> None:
        proc, self.proc = self.proc, None
        if proc is None or proc.poll() is not None:
            return
        for sig, wait_s in ((signal.SIGTERM, 10.0), (signal.SIGKILL, 5.0)):
            try:
                os.killpg(proc.pid, sig)
            except ProcessLookupError:
                return
            try:
                proc.wait(timeout=wait_s)
                return
            except subprocess.TimeoutExpired:
                continue

    def log_tail(self, n: int = 40) -> str:
        try:
            self.log.flush()
            lines = Path(self.log.name).read_text(errors="replace").splitlines()
        except OSError:
            return ""
        return "\n".join(lines[-n:])


# ----------------------------------------------------------------------------- HTTP


def timed_upload(
    client: httpx.Client, data: bytes, fields: dict[str, str], *, name: str = "bench.csv"
) -> tuple[float, dict[str, Any], dict[str, float]]:
    """POST a multipart upload; wall seconds until the 201 answer has arrived, its body,
    and the server's stage times in seconds (its ``Server-Timing`` header)."""
    t0 = time.perf_counter()
    r = client.post("/api/v1/uploads/", data=fields, files={"file": (name, data, "text/csv")})
    elapsed = time.perf_counter() - t0
    if r.status_code != 201:
        raise RuntimeError(f"upload answered {r.status_code}: {r.text[:2000]}")
    return elapsed, r.json(), server_timing(r.headers.get("Server-Timing", ""))


def server_timing(value: str) -> dict[str, float]:
    """``name;dur=ms, ...`` (W3C Server Timing) as seconds by name; entries without dur skipped."""
    stages: dict[str, float] = {}
    for entry in value.split(","):
        name, _, params = entry.strip().partition(";")
        for param in params.split(";"):
            key, _, ms = param.strip().partition("=")
            if key == "dur" and name:
                stages[name] = float(ms) / 1000.0
    return stages


def stages_text(stages: dict[str, float], *, skip: tuple[str, ...] = ()) -> str:
    """Stage times in seconds as ``name ms, ...`` in their order, without the ``skip`` names."""
    return ", ".join(f"{k} {v * 1000:,.0f}" for k, v in stages.items() if k not in skip)


def timed_get(client: httpx.Client, path: str) -> tuple[float, bytes]:
    """GET ``path`` and read the whole body; wall seconds until the last byte, and the body."""
    t0 = time.perf_counter()
    with client.stream("GET", path) as r:
        body = b"".join(r.iter_raw())
        status = r.status_code
    elapsed = time.perf_counter() - t0
    if status != 200:
        raise RuntimeError(f"GET {path} answered {status}: {body[:2000]!r}")
    return elapsed, body


# ----------------------------------------------------------------------------- load


@dataclass(frozen=True)
class LoadResult:
    tool: str
    seconds: float
    connections: int
    requests: int
    rps: float
    p50_s: float
    p99_s: float
    errors: int


_WRK_UNITS = {"us": 1e-6, "ms": 1e-3, "s": 1.0, "m": 60.0}

_WRK_BUST = """
local made = 0
function setup(thread)
  made = made + 1
  thread:set("tid", made)
end
function init(args)
  n = 0
end
function request()
  n = n + 1
  return wrk.format("GET", PATH .. "&start=-" .. (OFFSET + tid * 1000000 + n))
end
"""


def _wrk_seconds(text: str) -> float:
    m = re.fullmatch(r"([\d.]+)(us|ms|s|m)", text.strip())
    if not m:
        raise ValueError(f"unreadable wrk duration {text!r}")
    return float(m.group(1)) * _WRK_UNITS[m.group(2)]


def wrk_load(
    url: str,
    path: str,
    *,
    headers: dict[str, str],
    seconds: int,
    connections: int,
    threads: int,
    bust_cache: bool,
    bust_offset: int = 0,
) -> LoadResult:
    """Run wrk for a fixed duration on one path (``bust_cache``: a new ``start=`` per request).

    The ``start=`` values are ``-(bust_offset + thread * 1e6 + i)``: give each run its own
    ``bust_offset`` so no run meets answers another run has left in a shared cache.
    """
    wrk = shutil.which("wrk")
    if wrk is None:
        raise FileNotFoundError("wrk")
    cmd = [
        wrk,
        "-t",
        str(threads),
        "-c",
        str(connections),
        "-d",
        f"{seconds}s",
        "--timeout",
        "60s",
        "--latency",
    ]
    for k, v in headers.items():
        cmd += ["-H", f"{k}: {v}"]
    with tempfile.NamedTemporaryFile("w", suffix=".lua", delete=False) as lua:
        head = f"PATH = {path!r}\nOFFSET = {int(bust_offset)}\n"
        lua.write((head + _WRK_BUST) if bust_cache else "")
    try:
        if bust_cache:
            cmd += ["-s", lua.name]
        cmd.append(url + path)
        out = subprocess.run(
            cmd, capture_output=True, text=True, timeout=seconds + 120, check=True
        ).stdout
    finally:
        os.unlink(lua.name)
    pct = dict(re.findall(r"^\s+(\d+)%\s+(\S+)\s*$", out, re.M))
    m_req = re.search(r"(\d+) requests in ([\d.]+\w+)", out)
    m_rps = re.search(r"Requests/sec:\s+([\d.]+)", out)
    if not (m_req and m_rps and "50" in pct and "99" in pct):
        raise RuntimeError(f"unreadable wrk output:\n{out}")
    errors = 0
    m_non = re.search(r"Non-2xx or 3xx responses:\s+(\d+)", out)
    if m_non:
        errors += int(m_non.group(1))
    m_sock = re.search(r"Socket errors: connect (\d+), read (\d+), write (\d+), timeout (\d+)", out)
    if m_sock:
        errors += sum(int(x) for x in m_sock.groups())
    return LoadResult(
        tool="wrk",
        seconds=_wrk_seconds(m_req.group(2)),
        connections=connections,
        requests=int(m_req.group(1)),
        rps=float(m_rps.group(1)),
        p50_s=_wrk_seconds(pct["50"]),
        p99_s=_wrk_seconds(pct["99"]),
        errors=errors,
    )


def python_load(
    url: str,
    path: str,
    *,
    headers: dict[str, str],
    seconds: int,
    connections: int,
    bust_cache: bool,
    bust_offset: int = 0,
) -> LoadResult:
    """The same bounded load from threads with one httpx client each (when wrk is missing)."""
    deadline = time.monotonic() + seconds
    latencies: list[float] = []
    errors = [0]
    lock = threading.Lock()

    def worker(k: int) -> None:
        i = 0
        with httpx.Client(base_url=url, headers=headers, timeout=60.0, trust_env=False) as c:
            while time.monotonic() < deadline:
                i += 1
                p = f"{path}&start=-{bust_offset + k * 1_000_000 + i}" if bust_cache else path
                t0 = time.perf_counter()
                try:
                    r = c.get(p)
                    ok = r.status_code == 200
                except httpx.HTTPError:
                    ok = False
                dt = time.perf_counter() - t0
                with lock:
                    if ok:
                        latencies.append(dt)
                    else:
                        errors[0] += 1

    t0 = time.perf_counter()
    threads = [threading.Thread(target=worker, args=(k + 1,)) for k in range(connections)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=seconds + 120)
    elapsed = time.perf_counter() - t0
    lat = np.array(latencies) if latencies else np.array([np.nan])
    return LoadResult(
        tool="python threads + httpx",
        seconds=elapsed,
        connections=connections,
        requests=len(latencies),
        rps=len(latencies) / elapsed,
        p50_s=float(np.percentile(lat, 50)),
        p99_s=float(np.percentile(lat, 99)),
        errors=errors[0],
    )


# ----------------------------------------------------------------------------- facts


def _meminfo_gib() -> str:
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal:"):
                return f"{int(line.split()[1]) / 1024**2:.1f} GiB"
    except OSError:
        pass
    return "unknown"


def _cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def _version(module: str) -> str:
    try:
        from importlib.metadata import version

        return version(module)
    except Exception:  # noqa: BLE001 - a missing package is reported, not raised
        return "not installed"


def machine_facts(pg_settings: dict[str, str]) -> list[tuple[str, str]]:
    """What the figures were measured on."""
    wrk = shutil.which("wrk")
    wrk_version = "not installed"
    if wrk:
        try:
            first = subprocess.run([wrk, "-v"], capture_output=True, text=True, timeout=10)
            wrk_version = (first.stdout + first.stderr).split("\n")[0].split(" [")[0]
        except (OSError, subprocess.SubprocessError):
            wrk_version = "present"
    return [
        ("CPU", f"{_cpu_model()}, {os.cpu_count()} cores"),
        ("memory", _meminfo_gib()),
        ("PostgreSQL", pg_settings.get("server_version", "?")),
        (
            "PostgreSQL settings",
            ", ".join(
                f"{k} {pg_settings[k]}"
                for k in ("shared_buffers", "work_mem", "max_wal_size", "synchronous_commit")
                if k in pg_settings
            ),
        ),
        ("Python", platform.python_version()),
        (
            "packages",
            ", ".join(
                f"{p} {_version(p)}"
                for p in ("numpy", "astropy", "pandas", "Django", "psycopg", "gunicorn", "httpx")
            ),
        ),
        ("load tool", wrk_version),
        ("kernel", platform.release()),
        ("load average", loadavg_text() + " at the start (other work on the machine)"),
    ]


def loadavg_text() -> str:
    """The 1, 5 and 15 minute load averages of the machine."""
    try:
        return " ".join(f"{x:.2f}" for x in os.getloadavg())
    except OSError:
        return "unknown"


# ----------------------------------------------------------------------------- report


@dataclass
class Row:
    """One line of the report.

    ``ratio`` is lcstore / reference when ``higher_is_better`` is False (a
    slowdown, goal an upper bound), reference / lcstore otherwise (a speed-up,
    goal a lower bound).
    """

    name: str
    n: str = ""
    product: str = ""
    reference: str = ""
    ratio: float | None = None
    goal: float | None = None
    higher_is_better: bool = False
    notes: str = ""
    children: list[Row] = field(default_factory=list)

    @property
    def verdict(self) -> str:
        if self.ratio is None or self.goal is None:
            return ""
        ok = self.ratio >= self.goal if self.higher_is_better else self.ratio <= self.goal
        return "ok" if ok else "MISS"

    @property
    def goal_text(self) -> str:
        if self.goal is None:
            return ""
        return f">= {self.goal:g}x" if self.higher_is_better else f"<= {self.goal:g}x"

    @property
    def ratio_text(self) -> str:
        return "" if self.ratio is None else f"{self.ratio:.2f}x"


def seconds_text(s: float | None) -> str:
    if s is None or not np.isfinite(s):
        return "-"
    if s < 1e-3:
        return f"{s * 1e6:.0f} us"
    if s < 1.0:
        return f"{s * 1e3:.1f} ms"
    return f"{s:.2f} s"


def format_table(rows: Sequence[Row]) -> str:
    """The rows as one fixed-width text table."""
    head = ("measurement", "n", "lcstore", "reference", "ratio", "goal", "verdict", "notes")
    cells = [head]
    for r in rows:
        cells.append(
            (r.name, r.n, r.product, r.reference, r.ratio_text, r.goal_text, r.verdict, r.notes)
        )
    widths = [max(len(c[i]) for c in cells) for i in range(len(head) - 1)]

    def line(c: Sequence[str]) -> str:
        left = "  ".join(
            c[i].rjust(widths[i]) if i in (1, 2, 3, 4) else c[i].ljust(widths[i])
            for i in range(len(head) - 1)
        )
        return (left + "  " + c[-1]).rstrip()

    rule = "-" * min(200, sum(widths) + 2 * (len(widths)) + 20)
    out = [line(head), rule]
    out += [line(c) for c in cells[1:]]
    return "\n".join(out)


def chunked(n: int, size: int) -> Iterator[tuple[int, int]]:
    """(start, stop) pairs covering range(n) in pieces of ``size``."""
    for start in range(0, n, size):
        yield start, min(n, start + size)
