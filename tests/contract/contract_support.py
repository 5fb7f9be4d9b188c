"""Helpers of the contract tests: the binary, a started server, small data tables, the spec.

The server is the real binary (``$MIXGAUGE_BIN``, else ``<repo>/target/release/mixgauge``),
started with ``serve`` on a free loopback port and a fresh data folder, and stopped by its own
process id. Its environment has no ``MIXGAUGE_*`` variable of the caller's, so a developer's
settings cannot change what is tested.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import time
from dataclasses import dataclass, field
from pathlib import Path

import requests

REPO_ROOT = Path(__file__).resolve().parents[2]
SPEC_DIR = REPO_ROOT / "api-spec"
SPEC_PATH = SPEC_DIR / "openapi.yaml"
SERVICE_SRC = REPO_ROOT / "crates" / "mixgauge-service" / "src"
BUILD_HINT = "build it with `cargo build --release -p mixgauge-cli` or set MIXGAUGE_BIN"

#: Limits the contract server runs with: small, so a generated request cannot make it work long.
SERVER_ARGS = [
    "--workers", "1",
    "--max-upload-bytes", "65536",
    "--max-rows", "2000",
    "--max-columns", "16",
    "--max-candidates", "4",
    "--request-timeout", "30",
]


def binary_path() -> Path:
    given = os.environ.get("MIXGAUGE_BIN")
    return Path(given) if given else REPO_ROOT / "target" / "release" / "mixgauge"


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


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


@dataclass
class Server:
    """One `mixgauge serve` process."""

    binary: Path
    data_dir: Path
    log_path: Path
    extra_env: dict[str, str] = field(default_factory=dict)
    port: int = 0
    process: subprocess.Popen | None = None

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def start(self, timeout: float = 30.0) -> "Server":
        env = {k: v for k, v in os.environ.items() if not k.startswith("MIXGAUGE_")}
        env.update(self.extra_env)
        env.setdefault("RUST_LOG", "warn")
        for _attempt in range(3):
            self.port = free_port()
            log = open(self.log_path, "ab")
            self.process = subprocess.Popen(
                [str(self.binary), "serve", "--listen", f"127.0.0.1:{self.port}",
                 "--data-dir", str(self.data_dir), *SERVER_ARGS],
                stdout=log, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL, env=env,
            )
            log.close()
            deadline = time.monotonic() + timeout
            while time.monotonic() < deadline:
                if self.process.poll() is not None:
                    break  # exited (e.g. the port was taken meanwhile): try another port
                try:
                    if requests.get(f"{self.url}/readyz", timeout=2).status_code == 200:
                        return self
                except requests.RequestException:
                    pass
                time.sleep(0.1)
            self.stop()
        raise RuntimeError(f"mixgauge serve did not become ready; its log:\n{self.log()}")

    def stop(self) -> None:
        p = self.process
        if p is None or p.poll() is not None:
            return
        p.send_signal(signal.SIGTERM)
        try:
            p.wait(timeout=20)
        except subprocess.TimeoutExpired:
            p.kill()
            p.wait(timeout=10)

    def log(self) -> str:
        try:
            return self.log_path.read_text(errors="replace")[-4000:]
        except OSError:
            return "(no log)"

    # ---- plain calls used to set up states (each checks its own status) ----

    def upload(self, body: bytes, content_type: str = "text/csv") -> dict:
        r = requests.post(f"{self.url}/v1/datasets", data=body,
                          headers={"Content-Type": content_type}, timeout=30)
        assert r.status_code in (200, 201), r.text
        return r.json()

    def create_sweep(self, dataset: str, settings: dict, key: str | None = None) -> str:
        headers = {"Idempotency-Key": key} if key else {}
        r = requests.post(f"{self.url}/v1/sweeps", json={"dataset": dataset, "settings": settings},
                          headers=headers, timeout=30)
        assert r.status_code in (200, 202), r.text
        return r.json()["id"]

    def sweep(self, sweep_id: str) -> dict:
        r = requests.get(f"{self.url}/v1/sweeps/{sweep_id}", timeout=30)
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
        return requests.post(f"{self.url}/v1/sweeps/{sweep_id}/cancel", timeout=30).status_code
