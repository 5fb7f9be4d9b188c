"""Fixtures of the service tests.

The binary is ``$MIXGAUGE_BIN`` when set, else ``<repo>/target/release/mixgauge``. A missing
binary fails every test (it is never skipped). ``server`` gives a started server on a fresh
data folder and stops it afterwards; ``start_server`` starts more of them (other flags, a
shared folder) and stops every one it started. The dataset fixtures write reference data that
packages ship (iris with scikit-learn, Palmer penguins with `palmerpenguins`).
"""

from __future__ import annotations

import os
import subprocess
from pathlib import Path

import pytest

from service_helpers import REPO_ROOT, BUILD_HINT, Server, binary_path


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
    return f"mixgauge binary: {path} ({version})"


@pytest.fixture(scope="session")
def mixgauge_binary() -> Path:
    path = binary_path()
    if not path.is_file():
        pytest.fail(f"mixgauge binary not found at {path}: {BUILD_HINT}", pytrace=False)
    if not os.access(path, os.X_OK):
        pytest.fail(f"mixgauge binary at {path} is not executable: {BUILD_HINT}", pytrace=False)
    return path


@pytest.fixture
def start_server(mixgauge_binary: Path, tmp_path: Path):
    """Starts servers: ``start_server(data_dir=None, workers=1, args=())``; each started one is
    stopped at the end of the test."""
    started: list[Server] = []

    def start(data_dir: Path | None = None, workers: int = 1, args=()) -> Server:
        n = len(started)
        data_dir = data_dir or tmp_path / f"data-{n}"
        log_dir = tmp_path / f"logs-{n}"
        log_dir.mkdir(parents=True, exist_ok=True)
        s = Server(mixgauge_binary, data_dir, log_dir, workers, list(args))
        started.append(s)
        return s.start()

    yield start
    for s in started:
        s.stop()


@pytest.fixture
def server(start_server) -> Server:
    """A started server on a fresh data folder, one worker."""
    return start_server()


# ---- datasets -----------------------------------------------------------------------------

#: The demo data (invented trailer telemetry, committed with its generator `mixgauge demo`):
#: used only where any data will do (durability, load), never as a reference.
DEMO_CSV = REPO_ROOT / "demo-data" / "reefer-telemetry.csv"


@pytest.fixture(scope="session")
def iris_csv(tmp_path_factory) -> Path:
    """Iris, as shipped with scikit-learn (`sklearn.datasets.load_iris`): its four feature
    columns as CSV, 150 rows, the values written in Python's shortest round-trip form."""
    import csv

    from sklearn.datasets import load_iris

    iris = load_iris()
    path = tmp_path_factory.mktemp("iris") / "iris.csv"
    with open(path, "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(iris.feature_names)
        for row in iris.data:
            w.writerow([repr(float(v)) for v in row])
    return path


@pytest.fixture(scope="session")
def penguins_csv(tmp_path_factory) -> Path:
    """Palmer penguins, as shipped with the PyPI package `palmerpenguins`
    (`load_penguins()`), with every row that has a missing value dropped in pandas first
    (344 rows → 333), all eight columns kept as CSV (text columns included)."""
    from palmerpenguins import load_penguins

    df = load_penguins().dropna()
    path = tmp_path_factory.mktemp("penguins") / "penguins.csv"
    df.to_csv(path, index=False, lineterminator="\n")
    return path


@pytest.fixture(scope="session")
def demo_csv() -> Path:
    if not DEMO_CSV.is_file():
        pytest.fail(
            f"{DEMO_CSV} is missing: regenerate it with `mixgauge demo` (see DEVELOPERS.md)",
            pytrace=False,
        )
    return DEMO_CSV
