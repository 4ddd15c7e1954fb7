"""A person's path through the pages, in headless Chromium against a live test server.

Debian's ``chromium`` and ``chromium-driver`` (``/usr/bin/chromium``,
``/usr/bin/chromedriver``) driven with Selenium; no browser is ever downloaded
(the driver path is given, so Selenium Manager is not consulted).
``scripts/test.sh`` installs both packages when it can; without them the test
is skipped and says why.

References named beside the checks:
- the PNG signature and size are read back with Pillow (an outside decoder);
- the image's ``naturalWidth`` is the browser's own decoding of the plot
  (HTML Living Standard, ``HTMLImageElement.naturalWidth``: 0 until decoded).
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any
from urllib.parse import parse_qs, urlsplit

import pytest
from PIL import Image

CHROMIUM = Path("/usr/bin/chromium")
CHROMEDRIVER = Path("/usr/bin/chromedriver")
WINDOW = (1280, 1000)
# Flags for a closed network: no background connections, updates, sync or QUIC.
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
    f"--window-size={WINDOW[0]},{WINDOW[1]}",
]


def _missing_browser() -> str | None:
    for exe, package in ((CHROMIUM, "chromium"), (CHROMEDRIVER, "chromium-driver")):
        if not (exe.is_file() and os.access(exe, os.X_OK)):
            return (
                f"{exe} is missing: install Debian's {package} "
                "(apt-get install chromium chromium-driver; scripts/test.sh does it as root)"
            )
    return None


pytestmark = [
    pytest.mark.skipif(_missing_browser() is not None, reason=str(_missing_browser())),
    # The live server sees only committed rows; the roles of migration 0002 are
    # restored after each flush (serialized_rollback).
    pytest.mark.django_db(transaction=True, serialized_rollback=True),
]

webdriver = pytest.importorskip("selenium.webdriver", reason="selenium is not installed")
from selenium.webdriver.chrome.service import Service  # noqa: E402
from selenium.webdriver.common.by import By  # noqa: E402
from selenium.webdriver.support.ui import WebDriverWait  # noqa: E402

CSV_R = "time,value,error\n60000.2,1.0,0.1\n60001.3,1.4,0.1\n60002.1,1.1,0.1\n60003.6,1.8,0.1\n"
CSV_V = "time,value,error\n60000.3,0.8,0.1\n60001.4,1.0,0.1\n60002.2,0.9,0.1\n60003.5,1.5,0.1\n"
CSV_GAMMA = (
    "time,value,error,upper_limit\n60000.5,1e-6,1e-7,0\n60001.5,2e-6,2e-7,0\n60002.5,5e-7,,1\n"
)
BASE = {"time_format": "mjd", "time_scale": "tdb", "time_reference": "BARYCENTER"}


@pytest.fixture
def points(
    catalogue: dict[str, Any],
    contributor: Any,
    client_for: Callable[[Any], Any],
    upload_file: Callable[..., Any],
) -> list[str]:
    """R, V and gamma-ray points of tarn-7, uploaded through the API; returns the band slugs."""
    api = client_for(contributor)
    for content, band, instrument, unit in (
        (CSV_R, "r", "hollow-hill-1m", "mJy"),
        (CSV_V, "v", "hollow-hill-1m", "mJy"),
        (CSV_GAMMA, "gamma", "wren-lat", "ph/(cm2 s)"),
    ):
        r = upload_file(
            api,
            content,
            f"{band}.csv",
            source="tarn-7",
            band=band,
            instrument=instrument,
            value_unit=unit,
            **BASE,
        )
        assert r.status_code == 201, r.json()
    return ["r", "v", "gamma"]


@pytest.fixture
def browser(tmp_path: Path) -> Iterator[Any]:
    options = webdriver.ChromeOptions()
    options.binary_location = str(CHROMIUM)
    for flag in FLAGS:
        options.add_argument(flag)
    profile = tmp_path / "profile"
    profile.mkdir()
    options.add_argument(f"--user-data-dir={profile}")
    service = Service(executable_path=str(CHROMEDRIVER), log_output=str(tmp_path / "driver.log"))
    driver = webdriver.Chrome(service=service, options=options)
    driver.set_page_load_timeout(30)
    # The viewport (what a screenshot shows) exactly the window size, whatever
    # room headless Chromium keeps for its simulated toolbars.
    driver.execute_cdp_cmd(
        "Emulation.setDeviceMetricsOverride",
        {"width": WINDOW[0], "height": WINDOW[1], "deviceScaleFactor": 1, "mobile": False},
    )
    try:
        yield driver
    finally:
        driver.quit()


def _plot_loaded(driver: Any) -> bool:
    return bool(
        driver.execute_script(
            "const i = document.getElementById('lightcurve-plot');"
            "return i !== null && i.complete && i.naturalWidth > 0;"
        )
    )


def _plot_bands(driver: Any) -> list[str]:
    src = driver.find_element(By.ID, "lightcurve-plot").get_attribute("src")
    return parse_qs(urlsplit(src).query)["bands"][0].split(",")


def _bands_asked(browser: Any) -> list[str]:
    """The ``bands`` of the page's address (empty while there is none)."""
    return parse_qs(urlsplit(browser.current_url).query).get("bands", [])


def test_sign_in_switch_band_and_screenshot(
    live_server: Any, points: list[str], contributor: Any, browser: Any, tmp_path: Path
) -> None:
    wait = WebDriverWait(browser, 15)

    # Sign in through the form, asking for the source page.
    browser.get(f"{live_server.url}/sources/tarn-7/")
    assert urlsplit(browser.current_url).path == "/login/"
    browser.find_element(By.ID, "id_username").send_keys(contributor.username)
    browser.find_element(By.ID, "id_password").send_keys("pw-" + contributor.username)
    browser.find_element(By.ID, "sign-in").click()
    wait.until(lambda d: urlsplit(d.current_url).path == "/sources/tarn-7/")
    assert browser.title == "Tarn 7 · lcstore"
    assert f"Sign out {contributor.username}" in browser.page_source

    # Every band with points is ticked and drawn.
    wait.until(_plot_loaded)
    assert sorted(_plot_bands(browser)) == sorted(points)
    first_src = browser.find_element(By.ID, "lightcurve-plot").get_attribute("src")

    # Untick V and redraw: the page, its checkboxes and the plot follow.
    box = browser.find_element(By.ID, "band-v")
    assert box.is_selected()
    box.click()
    browser.find_element(By.ID, "redraw").click()
    # The redrawn page's own URL: it names bands, and v is not among them (while the page
    # loads, the address can be one with no query at all).
    wait.until(lambda d: "v" not in _bands_asked(d) and _bands_asked(d))
    assert sorted(_bands_asked(browser)) == ["gamma", "r"]
    assert not browser.find_element(By.ID, "band-v").is_selected()
    assert browser.find_element(By.ID, "band-r").is_selected()
    wait.until(_plot_loaded)
    img = browser.find_element(By.ID, "lightcurve-plot")
    assert img.get_attribute("src") != first_src
    assert sorted(_plot_bands(browser)) == ["gamma", "r"]
    assert "format=png" in img.get_attribute("src")
    assert int(browser.execute_script("return arguments[0].naturalWidth;", img)) > 0

    # A screenshot of the window, read back with Pillow.
    shot = tmp_path / "source-page.png"
    assert browser.save_screenshot(str(shot))
    assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    viewport = browser.execute_script("return [window.innerWidth, window.innerHeight];")
    with Image.open(shot) as picture:
        assert picture.format == "PNG"
        assert picture.size == tuple(viewport)
    assert tuple(viewport) == WINDOW
