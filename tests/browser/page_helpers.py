"""Helpers of the browser tests: a `mixgauge serve` process (:class:`Server`, the shared
:class:`mixgauge_under_test.ServeProcess` with a JSON getter), a headless
Chromium driven by selenium (:func:`start_browser`), and screenshots and console logs kept
under ``target/artifacts/``.

Nothing here computes an expected result: what the page shows is compared with what the
server's API answers for the same sweep or upload.
"""

from __future__ import annotations

import base64
import json
import os
from pathlib import Path

import pytest

from mixgauge_under_test import REPO_ROOT, ServeProcess

#: Screenshots and console logs of the last run; kept whether the tests pass or fail.
ARTIFACTS = REPO_ROOT / "target" / "artifacts"

CHROMIUM = Path(os.environ.get("CHROMIUM_BIN") or "/usr/bin/chromium")
CHROMEDRIVER = Path(os.environ.get("CHROMEDRIVER_BIN") or "/usr/bin/chromedriver")
BROWSER_HINT = (
    "install Debian's browser and its driver with `apt-get install -y chromium chromium-driver` "
    "(or set CHROMIUM_BIN and CHROMEDRIVER_BIN to a matching pair)"
)

#: Seconds one HTTP call from the test may take.
HTTP_TIMEOUT = 30
#: Browser window size: fixed, so screenshots of two runs are comparable.
WINDOW = (1280, 1600)


class Server(ServeProcess):
    """One `mixgauge serve` process over a fresh data folder, with ``workers`` workers."""

    def __init__(self, binary: Path, data_dir: Path, log_path: Path, workers: int):
        super().__init__(binary, data_dir, log_path, ["--workers", str(workers)])

    def get_json(self, path: str) -> dict:
        r = self.http.get(self.url(path), timeout=HTTP_TIMEOUT)
        assert r.status_code == 200, f"GET {path}: {r.status_code} {r.text}"
        return r.json()


def start_browser():
    """A headless Chromium under chromedriver, logging the browser console at every level.
    A missing browser or driver is a failure that says how to install them."""
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    for path, what in ((CHROMIUM, "Chromium"), (CHROMEDRIVER, "chromedriver")):
        if not path.is_file() or not os.access(path, os.X_OK):
            pytest.fail(f"{what} not found at {path}: {BROWSER_HINT}", pytrace=False)
    options = webdriver.ChromeOptions()
    options.binary_location = str(CHROMIUM)
    for arg in (
        "--headless=new",
        "--no-sandbox",
        "--disable-dev-shm-usage",
        f"--window-size={WINDOW[0]},{WINDOW[1]}",
        "--hide-scrollbars",
        "--force-device-scale-factor=1",
        "--lang=en-GB",
    ):
        options.add_argument(arg)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    service = Service(str(CHROMEDRIVER), log_output=str(ARTIFACTS / "chromedriver.log"))
    try:
        driver = webdriver.Chrome(service=service, options=options)
    except Exception as e:  # the driver's own message says what went wrong
        pytest.fail(f"headless Chromium did not start ({e}); {BROWSER_HINT}", pytrace=False)
    driver.set_window_size(*WINDOW)
    return driver


class Console:
    """The browser console, read once per check (reading empties chromedriver's buffer), and
    every entry kept in ``target/artifacts/<name>-console.log``."""

    def __init__(self, driver, name: str):
        self.driver = driver
        self.path = ARTIFACTS / f"{name}-console.log"
        self.entries: list[dict] = []
        self.path.write_text("")

    def read(self) -> list[dict]:
        new = self.driver.get_log("browser")
        self.entries.extend(new)
        with open(self.path, "a") as f:
            for e in new:
                f.write(json.dumps(e) + "\n")
        return self.entries

    def errors(self) -> list[dict]:
        """Entries at level SEVERE: script errors, failed loads and refused (CSP) resources."""
        return [e for e in self.read() if e.get("level") == "SEVERE"]


def save_screenshots(driver, name: str) -> list[Path]:
    """The window as the user sees it (``<name>.png``) and the whole page, however long
    (``<name>-full.png``). Never raises: a broken browser must not hide the test's failure."""
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    saved = []
    try:
        driver.switch_to.default_content()
        top = ARTIFACTS / f"{name}.png"
        driver.execute_script("window.scrollTo(0, 0)")
        if driver.save_screenshot(str(top)):
            saved.append(top)
        metrics = driver.execute_cdp_cmd("Page.getLayoutMetrics", {})
        size = metrics.get("cssContentSize") or metrics["contentSize"]
        shot = driver.execute_cdp_cmd(
            "Page.captureScreenshot",
            {
                "format": "png",
                "captureBeyondViewport": True,
                "clip": {"x": 0, "y": 0, "width": size["width"], "height": size["height"], "scale": 1},
            },
        )
        full = ARTIFACTS / f"{name}-full.png"
        full.write_bytes(base64.b64decode(shot["data"]))
        saved.append(full)
    except Exception as e:  # reported, not raised
        print(f"screenshot {name} not saved: {e}")
    return saved
