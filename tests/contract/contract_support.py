"""Helpers of the contract tests: the binary, a started server, small data tables, the spec.

The server is the real binary (``$MIXGAUGE_BIN``, else ``<repo>/target/release/mixgauge``),
started with ``serve`` on a free loopback port and a fresh data folder, and stopped by its own
process id (the shared :class:`mixgauge_under_test.ServeProcess`). Its environment has no
``MIXGAUGE_*`` variable of the caller's, so a developer's settings cannot change what is tested.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

import requests

from mixgauge_under_test import REPO_ROOT, ServeProcess

SPEC_DIR = REPO_ROOT / "api-spec"
SPEC_PATH = SPEC_DIR / "openapi.yaml"
SERVICE_SRC = REPO_ROOT / "crates" / "mixgauge-service" / "src"

#: Limits the contract server runs with: small, so a generated request cannot make it work long.
SERVER_ARGS = [
    "--workers", "1",
    "--max-upload-bytes", "65536",
    "--max-rows", "2000",
    "--max-columns", "16",
    "--max-candidates", "4",
    "--request-timeout", "30",
]


def table_csv(columns: list[str], rows: list[tuple[float, ...]]) -> bytes:
    lines = [",".join(columns)] + [",".join(f"{v:.3f}" for v in r) for r in rows]
    return ("\n".join(lines) + "\n").encode()


def two_groups(count: int, centre: float, salt: int) -> list[tuple[float, float]]:
    """`count` rows in two groups, around (0, 0) and (centre, centre), with fixed offsets
    (no random draw: the same bytes every run, so the same dataset id)."""
    rows = []
    for i in range(count):
        shift = centre if i % 2 else 0.0
        a = shift + ((i * 37 + salt) % 11 - 5) / 10
        b = shift + ((i * 53 + salt) % 13 - 6) / 10
        rows.append((a, b))
    return rows


#: The seeded dataset: 40 rows, columns a and b, two clear groups.
SEED_CSV = table_csv(["a", "b"], two_groups(40, 5.0, 0))
#: Settings of the seeded sweep: four quick candidates.
SEED_SETTINGS = {"components": [1, 2], "covariances": ["full", "diagonal"], "folds": 2, "restarts": 1}
#: A dataset that the operation test deletes and uploads again (never used by a sweep).
SCRATCH_CSV = table_csv(["a", "b"], two_groups(12, 3.0, 7))
#: Rows to score under the seeded sweep's models.
SCORE_CSV = table_csv(["a", "b"], two_groups(6, 5.0, 3))
#: Settings that keep the one worker busy until the sweep is cancelled (300,000 slow fits,
#: under the server's limit of a million per sweep).
BUSY_SETTINGS = {
    "components": [1],
    "covariances": ["full"],
    "folds": 2,
    "restarts": 100_000,
    "tolerance": 0,
    "max_iterations": 1_000_000,
}


class Server(ServeProcess):
    """One `mixgauge serve` process with :data:`SERVER_ARGS`, its environment the caller's
    without any ``MIXGAUGE_*`` variable, plus ``extra_env``, at RUST_LOG=warn unless set."""

    def __init__(self, binary: Path, data_dir: Path, log_path: Path,
                 extra_env: dict[str, str] | None = None):
        env = {k: v for k, v in os.environ.items() if not k.startswith("MIXGAUGE_")}
        env.update(extra_env or {})
        env.setdefault("RUST_LOG", "warn")
        super().__init__(binary, data_dir, log_path, SERVER_ARGS, env)

    # ---- plain calls used to set up states (each checks its own status) ----

    def upload(self, body: bytes, content_type: str = "text/csv") -> dict:
        r = requests.post(f"{self.base}/v1/datasets", data=body,
                          headers={"Content-Type": content_type}, timeout=30)
        assert r.status_code in (200, 201), r.text
        return r.json()

    def create_sweep(self, dataset: str, settings: dict, key: str | None = None) -> str:
        headers = {"Idempotency-Key": key} if key else {}
        r = requests.post(f"{self.base}/v1/sweeps", json={"dataset": dataset, "settings": settings},
                          headers=headers, timeout=30)
        assert r.status_code in (200, 202), r.text
        return r.json()["id"]

    def sweep(self, sweep_id: str) -> dict:
        r = requests.get(f"{self.base}/v1/sweeps/{sweep_id}", timeout=30)
        assert r.status_code == 200, r.text
        return r.json()

    def wait_for(self, sweep_id: str, states: set[str], timeout: float = 120.0) -> dict:
        deadline = time.monotonic() + timeout
        while True:
            doc = self.sweep(sweep_id)
            if doc["state"] in states:
                return doc
            if time.monotonic() > deadline:
                raise AssertionError(f"sweep {sweep_id} is still {doc['state']} after {timeout} s")
            time.sleep(0.1)

    def cancel(self, sweep_id: str) -> int:
        return requests.post(f"{self.base}/v1/sweeps/{sweep_id}/cancel", timeout=30).status_code
