"""Fixtures of the service tests.

The binary is ``$MIXGAUGE_BIN`` when set, else ``<repo>/target/release/mixgauge``, found by
``tests/mixgauge_under_test.py`` (shared by the Python suites). A missing binary fails every
test (it is never skipped). ``server`` gives a started server on a fresh
data folder and stops it afterwards; ``start_server`` starts more of them (other flags, a
shared folder) and stops every one it started. The dataset fixtures write reference data that
packages ship (iris with scikit-learn, Palmer penguins with `palmerpenguins`).
"""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import pytest

# The session fixtures `mixgauge_binary` and `demo_csv` (used only where any data will do:
# durability, load; never as a reference) and the report header line, shared by the suites.
from mixgauge_under_test import demo_csv, mixgauge_binary, pytest_report_header  # noqa: F401
from service_helpers import Server


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
