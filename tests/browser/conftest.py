"""Fixtures of the browser tests.

The binary is ``$MIXGAUGE_BIN`` when set, else ``<repo>/target/release/mixgauge`` (found by
``tests/mixgauge_under_test.py``, shared by the Python suites); the browser
is Debian's Chromium with its chromedriver (``/usr/bin/chromium``, ``/usr/bin/chromedriver``).
A missing binary, browser or driver fails every test with a message saying how to get it; no
test is ever skipped.

``server`` is a started `mixgauge serve` (two workers) on a fresh data folder, stopped at the
end of the test; ``browser`` is a headless Chromium, closed at the end of the test.
"""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import pytest

# The session fixtures `mixgauge_binary` and `demo_csv` (used here only as a file a user might
# upload; every expectation comes from the API), shared by the suites.
from mixgauge_under_test import (  # noqa: F401
    binary_version_line,
    demo_csv,
    mixgauge_binary,
    program_version,
)
from page_helpers import CHROMIUM, Server, start_browser


def pytest_report_header(config):
    return [binary_version_line(), f"browser: {CHROMIUM} ({program_version(CHROMIUM)})"]


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
