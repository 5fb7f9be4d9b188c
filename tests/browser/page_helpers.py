"""Helpers of the browser tests: a `mixgauge serve` process (:class:`Server`), a headless
Chromium driven by selenium (:func:`start_browser`), and screenshots and console logs kept
under ``target/artifacts/``.

Nothing here computes an expected result: what the page shows is compared with what the
server's API answers for the same sweep or upload.
"""

from __future__ import annotations

import base64
import json
import os
import signal
import socket
import subprocess
import time
from pathlib import Path

import pytest
import requests

REPO_ROOT = Path(__file__).resolve().parent.parent.parent
DEFAULT_BINARY = REPO_ROOT / "target" / "release" / "mixgauge"
BUILD_HINT = (
    f"build it with `cd {REPO_ROOT} && cargo build --release -p mixgauge-cli`, "
    "or point MIXGAUGE_BIN at an existing binary"
)
#: Screenshots and console logs of the last run; kept whether the tests pass or fail.
ARTIFACTS = REPO_ROOT / "target" / "artifacts"

CHROMIUM = Path(os.environ.get("CHROMIUM_BIN") or "/usr/bin/chromium")
CHROMEDRIVER = Path(os.environ.get("CHROMEDRIVER_BIN") or "/usr/bin/chromedriver")
BROWSER_HINT = (
    "install Debian's browser and its driver with `apt-get install -y chromium chromium-driver` "
    "(or set CHROMIUM_BIN and CHROMEDRIVER_BIN to a matching pair)"
)

#: Seconds the server may take to answer /readyz after it is started.
READY_TIMEOUT = 30
#: Seconds one HTTP call from the test may take.
HTTP_TIMEOUT = 30
#: Browser window size: fixed, so screenshots of two runs are comparable.
WINDOW = (1280, 1600)


def binary_path() -> Path:
    return Path(os.environ.get("MIXGAUGE_BIN") or DEFAULT_BINARY)


def free_port() -> int:
    """A loopback port nobody listens on right now (the server binds it a moment later)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Server:
    """One `mixgauge serve` process over a fresh data folder."""

    def __init__(self, binary: Path, data_dir: Path, log_path: Path, workers: int):
        self.binary = binary
        self.data_dir = data_dir
        self.log_path = log_path
        self.workers = workers
        self.proc: subprocess.Popen | None = None
        self.port: int | None = None
        self.http = requests.Session()

    @property
    def base(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def url(self, path: str) -> str:
        return self.base + path

    def start(self) -> "Server":
        last_error = None
        for _attempt in range(3):  # another process may grab the free port first
            self.port = free_port()
            cmd = [
                str(self.binary), "serve",
                "--listen", f"127.0.0.1:{self.port}",
                "--data-dir", str(self.data_dir),
                "--workers", str(self.workers),
            ]
            with open(self.log_path, "ab") as log:
                self.proc = subprocess.Popen(cmd, stdout=log, stderr=subprocess.STDOUT)
            deadline = time.monotonic() + READY_TIMEOUT
            while time.monotonic() < deadline:
                if self.proc.poll() is not None:
                    last_error = f"server exited with {self.proc.returncode}:\n{self.log()}"
                    break
                try:
                    r = self.http.get(self.url("/readyz"), timeout=2)
                    if r.status_code == 200 and r.json() == {"status": "ready"}:
                        return self
                except requests.ConnectionError:
                    pass
                time.sleep(0.05)
            else:
                self.stop()
                pytest.fail(f"server not ready within {READY_TIMEOUT} s:\n{self.log()}", pytrace=False)
        pytest.fail(f"server did not start: {last_error}", pytrace=False)

    def log(self) -> str:
        if not self.log_path.exists():
            return ""
        return self.log_path.read_text(errors="replace")[-4000:]

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(timeout=15)
        self.http.close()

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
