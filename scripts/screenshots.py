#!/usr/bin/env python
"""Pictures and a client transcript of the demo campaign, for the docs (run by hand).

    .venv/bin/python scripts/screenshots.py [--sources lbmc-0412] [--keep]

It starts the demo on its own (a temporary SQLite data directory:
``LCSTORE_DATA_DIR``, ``manage.py migrate``, ``manage.py load_campaign``,
``runserver`` on a free loopback port), then writes

- ``docs/screenshots/source-page.png``: the page of lbmc-0412 with R, gamma
  rays and X-rays, signed in as the demo curator, in headless Chromium;
- ``docs/screenshots/upload-rejected.png``: the upload page after posting a
  file with bad rows;
- ``docs/plots/lbmc-0412-lightcurve.png``: the API's PNG of five bands;
- ``docs/client-session.md``: a session with :class:`lcstore.client.Client`
  against that server, its code and its real output.

It needs Debian's chromium and chromium-driver and selenium in the venv, as
the browser test does. Nothing is written outside docs/ and the temporary
directory, which is removed at the end unless ``--keep`` is given.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import socket
import subprocess
import sys
import tempfile
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import httpx

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs"
PY = sys.executable
CHROMIUM = "/usr/bin/chromium"
CHROMEDRIVER = "/usr/bin/chromedriver"
WIDTH, HEIGHT = 1280, 900
SOURCE = "lbmc-0412"
PAGE_BANDS = ["R", "gamma-100mev-300gev", "xray-300ev-10kev"]
PLOT_QUERY = "bands=B,R,J,xray-300ev-10kev,gamma-100mev-300gev&bin=1d&format=png"
FLAGS = [
    "--headless=new",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-dev-shm-usage",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--hide-scrollbars",
    "--force-device-scale-factor=1",
    f"--window-size={WIDTH},{HEIGHT}",
]

# A contributor's file with three bad rows (the upload page lists each).
BAD_CSV = """\
time,value,error
60210.31,15.42,0.02
60211.29,fifteen,0.02
60212.30,15.38,-0.03
,15.51,0.02
60213.33,15.47,0.02
"""

# A small good file for the client session (R magnitudes, times as MJD UTC).
GOOD_CSV = """\
time,value,error
60203.1912,15.402,0.018
60203.2409,15.417,0.019
60204.1876,15.366,0.017
60204.2311,15.371,0.018
60205.2054,15.318,0.016
"""

SESSION = """\
import os
from lcstore.client import Client, LcstoreError

lc = Client(os.environ["LCSTORE_URL"], os.environ["LCSTORE_TOKEN"])

print("== sources()")
for s in lc.sources():
    bands = ", ".join(f"{b['band']} ({b['n_points']})" for b in s["summary"])
    print(f"{s['slug']:10} {s['name']:17} z={s['redshift']:<6} {bands}")

print("\\n== lightcurve(): R in mJy, daily bins, as an astropy Table")
t = lc.lightcurve("lbmc-0412", bands="R", unit="mJy", bin="1d", start=59980, end=59990)
print(t.meta["TIMESYS"], t.meta["TREFPOS"], t.meta["time_format"], "uploads", t.meta["uploads"])
print({c: str(t[c].unit) for c in t.colnames if t[c].unit is not None})
t[:5].pprint(max_width=110)

print("\\n== lightcurve(): R and gamma rays as nu F_nu on one axis")
t = lc.lightcurve(
    "lbmc-0412", bands=["R", "gamma-100mev-300gev"], unit="nufnu", bin="1d", start=59980, end=59983
)
print("value unit:", t["value"].unit)
t["value"].info.format = ".3e"
t["error"].info.format = ".2e"
t.pprint(max_width=110)

print("\\n== lags(): gamma rays against R (positive lag: gamma rays later)")
lag = lc.lags("lbmc-0412", x="R", y="gamma-100mev-300gev", lag_min=-30, lag_max=30, lag_step=2)
print(lag["method_detail"])
print(f"peak lag {lag['peak_lag']:+.2f} d, centroid lag {lag['centroid_lag']:+.2f} d")
rows = lag["rows"]
for k in range(13, 18):
    print(f"  lag {rows['lag'][k]:+6.1f} d  DCF {rows['coefficient'][k]:.3f}"
          f" ± {rows['error'][k]:.3f}  pairs {rows['n_pairs'][k]}")

print("\\n== upload() with a progress bar")
record = lc.upload(
    "r_night.csv", source="lbmc-0412", band="R", instrument="velmora-13",
    value_unit="mag", time_format="mjd", time_scale="utc",
)
print({k: record[k] for k in ("id", "status", "counts", "time_range", "warnings")})

print("\\n== errors come back with the server's message")
send = dict(source="lbmc-0412", band="R", instrument="velmora-13",
            value_unit="mag", time_format="mjd", time_scale="utc", progress=False)
for path in ("r_night.csv", "r_bad_night.csv"):
    try:
        lc.upload(path, **send)
    except LcstoreError as exc:
        print(f"{path}: {exc}")
        print("  .status", exc.status, " .errors[0]", exc.errors[:1])
try:
    lc.lightcurve("lbmc-0412", bands="K")
except LcstoreError as exc:
    print(f"lightcurve: {exc}")
"""


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def manage(env: dict[str, str], *args: str) -> str:
    out = subprocess.run(
        [PY, "manage.py", *args], cwd=ROOT, env=env, check=True, capture_output=True, text=True
    )
    return out.stdout


@contextmanager
def demo_server(data_dir: Path, sources: str | None) -> Iterator[tuple[str, dict[str, str]]]:
    env = {k: v for k, v in os.environ.items() if k != "DATABASE_URL"}
    env |= {"LCSTORE_DATA_DIR": str(data_dir), "DEBUG": "1", "PYTHONUNBUFFERED": "1"}
    print("migrate …", flush=True)
    manage(env, "migrate", "--noinput")
    print("load_campaign …", flush=True)
    tail = manage(env, "load_campaign", *(["--sources", sources] if sources else []))
    print("  " + tail.strip().splitlines()[-1], flush=True)
    port = free_port()
    url = f"http://127.0.0.1:{port}"
    log = open(data_dir / "server.log", "w")  # noqa: SIM115 (closed below)
    server = subprocess.Popen(
        [PY, "manage.py", "runserver", "--noreload", f"127.0.0.1:{port}"],
        cwd=ROOT,
        env=env,
        stdout=log,
        stderr=subprocess.STDOUT,
    )
    try:
        deadline = time.monotonic() + 60
        while True:
            try:
                if httpx.get(f"{url}/login/", timeout=2).status_code == 200:
                    break
            except httpx.TransportError:
                pass
            if server.poll() is not None or time.monotonic() > deadline:
                raise RuntimeError(f"the demo server did not start; see {data_dir / 'server.log'}")
            time.sleep(0.3)
        print(f"demo server on {url}", flush=True)
        yield url, env
    finally:
        server.terminate()
        server.wait(timeout=10)
        log.close()


@contextmanager
def chromium(profile: Path) -> Iterator[Any]:
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in [*FLAGS, f"--user-data-dir={profile}"]:
        options.add_argument(flag)
    driver = webdriver.Chrome(service=Service(executable_path=CHROMEDRIVER), options=options)
    try:
        yield driver
    finally:
        driver.quit()


def full_page_shot(driver: Any, path: Path) -> None:
    """Screenshot of the whole page: the viewport stretched to the document's height."""
    height = int(driver.execute_script("return document.documentElement.scrollHeight;"))
    driver.execute_cdp_cmd(
        "Emulation.setDeviceMetricsOverride",
        {"width": WIDTH, "height": max(height, HEIGHT), "deviceScaleFactor": 1, "mobile": False},
    )
    path.parent.mkdir(parents=True, exist_ok=True)
    driver.save_screenshot(str(path))
    driver.execute_cdp_cmd(
        "Emulation.setDeviceMetricsOverride",
        {"width": WIDTH, "height": HEIGHT, "deviceScaleFactor": 1, "mobile": False},
    )
    print(f"wrote {path.relative_to(ROOT)}", flush=True)


def pages(url: str, user: str, password: str, work: Path) -> None:
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select, WebDriverWait

    with chromium(work / "profile") as driver:
        driver.set_window_size(WIDTH, HEIGHT)
        wait = WebDriverWait(driver, 60)
        driver.get(f"{url}/login/")
        driver.find_element(By.ID, "id_username").send_keys(user)
        driver.find_element(By.ID, "id_password").send_keys(password)
        driver.find_element(By.ID, "sign-in").click()
        wait.until(lambda d: "/login/" not in d.current_url)

        query = "&".join(f"bands={b}" for b in PAGE_BANDS) + "&bin=1d"
        driver.get(f"{url}/sources/{SOURCE}/?{query}")
        wait.until(
            lambda d: d.execute_script(
                "const i = document.getElementById('lightcurve-plot');"
                "return i && i.complete && i.naturalWidth > 0;"
            )
        )
        full_page_shot(driver, DOCS / "screenshots" / "source-page.png")

        bad = work / "r_bad_night.csv"
        bad.write_text(BAD_CSV)
        driver.get(f"{url}/upload/")
        driver.find_element(By.NAME, "file").send_keys(str(bad))
        Select(driver.find_element(By.NAME, "source")).select_by_value(SOURCE)
        Select(driver.find_element(By.NAME, "band")).select_by_value("R")
        Select(driver.find_element(By.NAME, "instrument")).select_by_value("velmora-13")
        driver.find_element(By.NAME, "value_unit").send_keys("mag")
        Select(driver.find_element(By.NAME, "time_format")).select_by_value("mjd")
        Select(driver.find_element(By.NAME, "time_scale")).select_by_value("utc")
        driver.find_element(By.ID, "send").click()
        wait.until(lambda d: d.find_elements(By.ID, "problems"))
        full_page_shot(driver, DOCS / "screenshots" / "upload-rejected.png")


def plot(url: str, token: str) -> None:
    r = httpx.get(
        f"{url}/api/v1/sources/{SOURCE}/lightcurve/?{PLOT_QUERY}",
        headers={"Authorization": f"Token {token}"},
        timeout=120,
    )
    r.raise_for_status()
    path = DOCS / "plots" / f"{SOURCE}-lightcurve.png"
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(r.content)
    print(f"wrote {path.relative_to(ROOT)}", flush=True)


def _terminal_text(raw: str) -> str:
    """What a terminal would show: each carriage return overwrites its line."""
    lines = []
    for line in raw.split("\n"):
        parts = [p for p in line.split("\r") if p.strip()]
        lines.append(parts[-1] if parts else "")
    return "\n".join(lines).rstrip() + "\n"


def client_session(url: str, token: str, work: Path, env: dict[str, str]) -> None:
    session_dir = work / "session"
    session_dir.mkdir()
    (session_dir / "r_night.csv").write_text(GOOD_CSV)
    (session_dir / "r_bad_night.csv").write_text(BAD_CSV)
    (session_dir / "session.py").write_text(SESSION)
    run_env = env | {"LCSTORE_URL": url, "LCSTORE_TOKEN": token, "PYTHONPATH": str(ROOT)}
    run_env.pop("DJANGO_SETTINGS_MODULE", None)
    out = subprocess.run(
        [PY, "session.py"],
        cwd=session_dir,
        env=run_env,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        timeout=300,
    )
    # Bytes, not text mode: universal newlines would turn tqdm's \r into line breaks.
    transcript = _terminal_text(out.stdout.decode()).replace(token, "$LCSTORE_TOKEN")
    if out.returncode != 0:
        sys.stderr.write(transcript)
        raise RuntimeError(f"the client session failed ({out.returncode})")
    doc = f"""\
# A client session against the demo

A real session with `lcstore.client.Client` (no Django needed on the client
side) against the demo campaign, recorded by `scripts/screenshots.py`, which
starts the demo on a free loopback port, signs in as the demo curator and
runs the code below in a fresh interpreter with `LCSTORE_URL` and
`LCSTORE_TOKEN` set. The progress bar is tqdm's, on stderr; its last state is
shown. The files uploaded are `r_night.csv`

```text
{GOOD_CSV.rstrip()}
```

and `r_bad_night.csv`

```text
{BAD_CSV.rstrip()}
```

## Code

```python
{SESSION.rstrip()}
```

## Output

```text
{transcript.rstrip()}
```
"""
    path = DOCS / "client-session.md"
    path.write_text(doc)
    print(f"wrote {path.relative_to(ROOT)}", flush=True)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sources", help="load only these sources' files (load_campaign)")
    parser.add_argument("--keep", action="store_true", help="keep the temporary directory")
    args = parser.parse_args()
    for exe in (CHROMIUM, CHROMEDRIVER):
        if not os.access(exe, os.X_OK):
            sys.exit(f"{exe} is missing: apt-get install chromium chromium-driver")
    manifest = json.loads((ROOT / "fixtures" / "campaign.json").read_text())
    curator = next(p["username"] for p in manifest["people"] if p.get("role") == "curator")
    work = Path(tempfile.mkdtemp(prefix="lcstore-docs-"))
    (work / "data").mkdir()
    try:
        with demo_server(work / "data", args.sources) as (url, env):
            token = manage(
                env,
                "shell",
                "-v",
                "0",
                "-c",
                "from rest_framework.authtoken.models import Token; "
                f"print(Token.objects.get(user__username={curator!r}).key)",
            ).strip()
            pages(url, curator, "demo-" + curator, work)
            plot(url, token)
            client_session(url, token, work, env)
    finally:
        if args.keep:
            print(f"kept {work}")
        else:
            shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
