"""Fixtures of the browser tests.

The binary is ``$MIXGAUGE_BIN`` when set, else ``<repo>/target/release/mixgauge``; the browser
is Debian's Chromium with its chromedriver (``/usr/bin/chromium``, ``/usr/bin/chromedriver``).
A missing binary, browser or driver fails every test with a message saying how to get it; no
test is ever skipped.

``server`` is a started `mixgauge serve` (two workers) on a fresh data folder, stopped at the
end of the test; ``browser`` is a headless Chromium, closed at the end of the test.
"""

from __future__ import annotations

import os
import subprocess
from pathlib import Path

import pytest

from page_helpers import BUILD_HINT, CHROMIUM, REPO_ROOT, Server, binary_path, start_browser


def pytest_report_header(config):
    path = binary_path()
    if path.is_file():
        try:
            version = subprocess.run(
                [str(path), "--version"], capture_output=True, text=True, timeout=30
            ).stdout.strip()
        except OSError as e:  # reported again, as a failure, by the fixture
            version = f"not runnable: {e}"
    else:
        version = "MISSING"
    browser = "MISSING"
    if CHROMIUM.is_file():
        try:
            browser = subprocess.run(
                [str(CHROMIUM), "--version"], capture_output=True, text=True, timeout=30
            ).stdout.strip()
        except OSError as e:
            browser = f"not runnable: {e}"
    return [f"mixgauge binary: {path} ({version})", f"browser: {CHROMIUM} ({browser})"]


@pytest.fixture(scope="session")
def mixgauge_binary() -> Path:
    path = binary_path()
    if not path.is_file():
        pytest.fail(f"mixgauge binary not found at {path}: {BUILD_HINT}", pytrace=False)
    if not os.access(path, os.X_OK):
        pytest.fail(f"mixgauge binary at {path} is not executable: {BUILD_HINT}", pytrace=False)
    return path


@pytest.fixture
def server(mixgauge_binary: Path, tmp_path: Path):
    s = Server(mixgauge_binary, tmp_path / "data", tmp_path / "server.log", workers=2)
    s.start()
    yield s
    s.stop()


@pytest.fixture
def browser():
    driver = start_browser()
    yield driver
    driver.quit()


#: The demo data (invented trailer telemetry, committed with its generator `mixgauge demo`):
#: used here only as a file a user might upload; every expectation comes from the API.
DEMO_CSV = REPO_ROOT / "demo-data" / "reefer-telemetry.csv"


@pytest.fixture(scope="session")
def demo_csv() -> Path:
    if not DEMO_CSV.is_file():
        pytest.fail(
            f"{DEMO_CSV} is missing: regenerate it with `mixgauge demo` (see DEVELOPERS.md)",
            pytrace=False,
        )
    return DEMO_CSV
