"""A local cluster on one machine for the cluster tests and the cluster benchmark: PostgreSQL
(``$MIXGAUGE_TEST_POSTGRES``, default ``postgres://root@127.0.0.1:5432/test``) in a schema of
its own, one ``mixgauge serve --store … --workers 0`` API process and N ``mixgauge worker``
processes sharing a blob directory, each worker with its own cache and health port.

Workers are named ``w1`` … ``wN`` in the store, so a test can find which process holds a task
lease and kill exactly that one.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
import urllib.parse
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from mixgauge_under_test import ServeProcess, free_port  # noqa: E402

POSTGRES = os.environ.get("MIXGAUGE_TEST_POSTGRES", "postgres://root@127.0.0.1:5432/test")


def psql(query: str, url: str = POSTGRES) -> str:
    """Runs one statement with psql (unaligned, tuples only) and returns its output."""
    done = subprocess.run(
        ["psql", url, "-v", "ON_ERROR_STOP=1", "-qAtc", query],
        capture_output=True, text=True, timeout=60,
    )
    if done.returncode != 0:
        raise RuntimeError(f"psql failed on {query!r}: {done.stderr}")
    return done.stdout.strip()


def scoped_url(schema: str) -> str:
    sep = "&" if "?" in POSTGRES else "?"
    return f"{POSTGRES}{sep}options=" + urllib.parse.quote(f"-csearch_path={schema}")


class Worker:
    """One `mixgauge worker` process."""

    def __init__(self, binary: Path, name: str, store: str, blobs: str, workdir: Path,
                 lease: float, env: dict[str, str] | None = None):
        self.name = name
        self.port = free_port()
        self.log_path = workdir / f"{name}.log"
        cmd = [
            str(binary), "worker", "--store", store, "--blobs", blobs,
            "--cache", str(workdir / f"cache-{name}"), "--lease", str(lease),
            "--name", name, "--health-listen", f"127.0.0.1:{self.port}",
        ]
        with open(self.log_path, "ab") as log:
            self.proc = subprocess.Popen(cmd, stdout=log, stderr=subprocess.STDOUT,
                                         stdin=subprocess.DEVNULL, env=env)

    def wait_ready(self, http, timeout: float = 30) -> None:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"worker {self.name} exited:\n{self.log()}")
            try:
                if http.get(f"http://127.0.0.1:{self.port}/readyz", timeout=2).status_code == 200:
                    return
            except Exception:  # noqa: BLE001 - not listening yet
                pass
            time.sleep(0.05)
        raise RuntimeError(f"worker {self.name} not ready:\n{self.log()}")

    def metrics(self, http) -> dict[str, float]:
        text = http.get(f"http://127.0.0.1:{self.port}/metrics", timeout=5).text
        return {
            line.split()[0]: float(line.split()[1])
            for line in text.splitlines()
            if line and not line.startswith("#")
        }

    def log(self) -> str:
        return self.log_path.read_text(errors="replace")[-4000:] if self.log_path.exists() else ""

    def kill(self) -> None:
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGKILL)
            self.proc.wait(timeout=30)

    def stop(self) -> None:
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(timeout=40)
            except subprocess.TimeoutExpired:
                self.kill()


class Cluster:
    """The API and `workers` workers over a fresh schema; call :meth:`stop` at the end. Blobs go
    to a directory under ``workdir`` unless ``blobs`` names another location; ``env`` is every
    process's whole environment (the caller's when ``None``)."""

    def __init__(self, binary: Path, workdir: Path, schema: str, workers: int = 3,
                 lease: float = 3.0, blobs: str | None = None,
                 env: dict[str, str] | None = None):
        self.schema = schema
        psql(f"DROP SCHEMA IF EXISTS {schema} CASCADE; CREATE SCHEMA {schema}")
        self.store = scoped_url(schema)
        self.sql_url = self.store
        workdir.mkdir(parents=True, exist_ok=True)
        if blobs is None:
            blob_dir = workdir / "blobs"
            blob_dir.mkdir(parents=True, exist_ok=True)
            blobs = blob_dir.resolve().as_uri() + "/"
        self.blobs = blobs
        self.workdir = workdir
        self.api = ServeProcess(
            binary, workdir / "api-data", workdir / "api.log",
            args=["--store", self.store, "--blobs", self.blobs, "--workers", "0"], env=env,
        ).start()
        self.workers = [
            Worker(binary, f"w{i + 1}", self.store, self.blobs, workdir, lease, env)
            for i in range(workers)
        ]
        for w in self.workers:
            w.wait_ready(self.api.http)

    def sql(self, query: str) -> str:
        return psql(query, self.sql_url)

    def stop(self) -> None:
        for w in self.workers:
            w.stop()
        self.api.stop()
        try:
            psql(f"DROP SCHEMA IF EXISTS {self.schema} CASCADE")
        except RuntimeError:
            pass


def upload(server: ServeProcess, csv: Path) -> str:
    r = server.http.post(server.url("/v1/datasets"), data=csv.read_bytes(),
                         headers={"Content-Type": "text/csv"}, timeout=60)
    r.raise_for_status()
    return r.json()["id"]


def start_sweep(server: ServeProcess, dataset: str, settings: dict, data: dict) -> str:
    r = server.http.post(server.url("/v1/sweeps"),
                         json={"dataset": dataset, "settings": settings, "data": data},
                         timeout=60)
    assert r.status_code == 202, r.text
    return r.json()["id"]


def wait_final(server: ServeProcess, sweep: str, timeout: float = 600,
               on_progress=None) -> dict:
    """Polls the sweep until it ends; ``on_progress(job)`` is called at every poll."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        job = server.http.get(server.url(f"/v1/sweeps/{sweep}"), timeout=10).json()
        if on_progress is not None:
            on_progress(job)
        if job["state"] in ("succeeded", "failed", "cancelled"):
            return job
        time.sleep(0.05)
    raise AssertionError(f"sweep {sweep} did not end within {timeout} s")
