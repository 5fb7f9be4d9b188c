"""Fixtures of the contract tests (python -m pytest tests/contract).

``service`` is one server for the whole session, seeded so that every route that takes an id
has a real one to hit: a dataset uploaded as CSV and a sweep over it that has succeeded. The
binary is found by ``tests/mixgauge_under_test.py`` (shared by the Python suites); a missing
binary fails the tests that need it; nothing is skipped.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import pytest

from contract_support import SCRATCH_CSV, SEED_CSV, SEED_SETTINGS, Server
# The session fixture `mixgauge_binary` and the report header line, shared by the suites.
from mixgauge_under_test import mixgauge_binary, pytest_report_header  # noqa: F401


@dataclass
class Seeded:
    """A started server and the ids of what it was seeded with."""

    server: Server
    dataset: str
    scratch_dataset: str
    sweep: str
    #: (covariance, components) of every model the seeded sweep fitted.
    models: list[tuple[str, int]]

    @property
    def url(self) -> str:
        return self.server.base


@pytest.fixture(scope="session")
def start_server(mixgauge_binary: Path, tmp_path_factory):
    """Starts servers, ``start_server(name, env=None)``, each on a fresh data folder; every one
    started is stopped (by its own process id) at the end of the session."""
    started: list[Server] = []

    def start(name: str, env: dict[str, str] | None = None) -> Server:
        root = tmp_path_factory.mktemp(name)
        s = Server(mixgauge_binary, root / "data", root / "server.log", dict(env or {}))
        started.append(s)
        return s.start()

    yield start
    for s in started:
        s.stop()


@pytest.fixture(scope="session")
def service(start_server) -> Seeded:
    server = start_server("contract")
    dataset = server.upload(SEED_CSV)["id"]
    scratch = server.upload(SCRATCH_CSV)["id"]
    sweep = server.create_sweep(dataset, SEED_SETTINGS)
    doc = server.wait_for(sweep, {"succeeded", "failed", "cancelled"})
    assert doc["state"] == "succeeded", f"the seeded sweep did not succeed: {doc.get('error')}"
    models = [(c["covariance"], c["components"]) for c in doc["finished"]]
    assert len(models) == 4, doc["finished"]
    return Seeded(server, dataset, scratch, sweep, models)
