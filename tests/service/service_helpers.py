"""Helpers of the service tests: a `mixgauge serve` process (:class:`Server`), the
command-line twin of a sweep request (:func:`cli_sweep`), and exact comparison of result
documents (:func:`differences`). The fixtures that use them are in conftest.py.

:class:`Server` is the shared :class:`mixgauge_under_test.ServeProcess` (started on a free
loopback port over a data folder, ready once ``GET /readyz`` answers ``ready``, killed with
SIGKILL, stopped with SIGTERM and started again over the same folder) with one log file per
start, a timed SIGTERM (:meth:`Server.terminate`) and the API calls the tests make.

Nothing here computes an expected result: expected documents come from the command-line
``mixgauge sweep`` run on the same file, which the service must match.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import time
from pathlib import Path

import pytest
import requests

from mixgauge_under_test import ServeProcess

#: Seconds one HTTP call may take.
HTTP_TIMEOUT = 30
#: Seconds one CLI sweep may take.
CLI_TIMEOUT = 300

#: The Content-Type each data file extension implies.
CONTENT_TYPES = {
    ".csv": "text/csv",
    ".json": "application/json",
    ".npy": "application/x-npy",
}

FINAL_STATES = {"succeeded", "failed", "cancelled"}


class Server(ServeProcess):
    """One `mixgauge serve` process over ``data_dir``; restartable over the same folder, each
    start logging to its own ``server-N.log`` in ``log_dir``, at RUST_LOG=info unless the
    caller's environment sets it."""

    def __init__(self, binary: Path, data_dir: Path, log_dir: Path, workers: int, args: list[str]):
        env = dict(os.environ)
        env.setdefault("RUST_LOG", "info")
        super().__init__(binary, data_dir, None, ["--workers", str(workers), *args], env)
        self.log_dir = log_dir
        self.starts = 0

    def next_log_path(self) -> Path:
        self.starts += 1
        return self.log_dir / f"server-{self.starts}.log"

    def terminate(self, timeout: float) -> float:
        """SIGTERM, then wait up to ``timeout`` s; returns the seconds it took to exit
        (SIGKILL and a failure when it did not exit in time)."""
        assert self.running()
        t0 = time.monotonic()
        self.proc.send_signal(signal.SIGTERM)
        try:
            self.proc.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            self.kill()
            pytest.fail(f"server did not exit within {timeout} s of SIGTERM:\n{self.log()}")
        return time.monotonic() - t0

    # ---- API calls ----------------------------------------------------------------------

    def get(self, path: str, **kw) -> requests.Response:
        return self.http.get(self.url(path), timeout=HTTP_TIMEOUT, **kw)

    def post(self, path: str, **kw) -> requests.Response:
        return self.http.post(self.url(path), timeout=HTTP_TIMEOUT, **kw)

    def upload(self, path: Path) -> dict:
        """Uploads a data file with the Content-Type its extension implies; the dataset."""
        r = self.post(
            "/v1/datasets",
            data=path.read_bytes(),
            headers={"Content-Type": CONTENT_TYPES[path.suffix]},
        )
        assert r.status_code in (200, 201), f"upload of {path.name}: {r.status_code} {r.text}"
        return r.json()

    def create_sweep(self, dataset: str, settings: dict, data: dict | None = None) -> str:
        body = {"dataset": dataset, "settings": settings}
        if data is not None:
            body["data"] = data
        r = self.post("/v1/sweeps", json=body)
        assert r.status_code == 202, f"POST /v1/sweeps {body}: {r.status_code} {r.text}"
        sweep_id = r.json()["id"]
        assert r.headers.get("Location") == f"/v1/sweeps/{sweep_id}"
        return sweep_id

    def sweep(self, sweep_id: str) -> dict:
        r = self.get(f"/v1/sweeps/{sweep_id}")
        assert r.status_code == 200, f"GET /v1/sweeps/{sweep_id}: {r.status_code} {r.text}"
        return r.json()

    def wait_until(self, sweep_id: str, done, timeout: float, interval: float = 0.1) -> dict:
        """Polls the sweep until ``done(sweep)`` holds; fails after ``timeout`` s."""
        deadline = time.monotonic() + timeout
        seen = []
        while True:
            s = self.sweep(sweep_id)
            if not seen or seen[-1] != s["state"]:
                seen.append(s["state"])
            if done(s):
                return s
            if time.monotonic() > deadline:
                pytest.fail(
                    f"sweep {sweep_id} not there within {timeout} s; states seen {seen}, "
                    f"last {json.dumps({k: v for k, v in s.items() if k != 'result'})}"
                )
            time.sleep(interval)

    def wait_final(self, sweep_id: str, timeout: float) -> dict:
        return self.wait_until(sweep_id, lambda s: s["state"] in FINAL_STATES, timeout)

    def wait_succeeded(self, sweep_id: str, timeout: float) -> dict:
        s = self.wait_final(sweep_id, timeout)
        assert s["state"] == "succeeded", (
            f"sweep {sweep_id} ended {s['state']}: {s.get('error')}\n{self.log()}"
        )
        return s


# ---- the command-line twin ----------------------------------------------------------------


def cli_flags(settings: dict, data: dict | None = None) -> list[str]:
    """The `mixgauge sweep` flags that mean the same as a sweep request's settings and data.
    Every setting must be given (no defaults assumed on either side)."""
    flags = [
        "--components", ",".join(str(k) for k in settings["components"]),
        "--covariance", ",".join(settings["covariances"]),
        "--folds", str(settings["folds"]),
        "--restarts", str(settings["restarts"]),
        "--seed", str(settings["seed"]),
        "--tolerance", repr(settings["tolerance"]),
        "--max-iterations", str(settings["max_iterations"]),
    ]
    ridge = settings["ridge"]
    if ridge["kind"] == "relative":
        flags += ["--ridge-fraction", repr(ridge["value"])]
    else:
        flags += ["--ridge", repr(ridge["value"])]
    data = data or {}
    if data.get("columns"):
        flags.append("--columns=" + ",".join(data["columns"]))
    if data.get("labels"):
        flags += ["--labels", data["labels"]]
    if data.get("drop_incomplete"):
        flags.append("--drop-incomplete")
    if data.get("standardise"):
        flags.append("--standardise")
    return flags


def cli_sweep(binary: Path, data_file: Path, settings: dict, out_dir: Path,
              data: dict | None = None) -> tuple[dict, bytes]:
    """Runs `mixgauge sweep FILE ... --out result.json` and returns the parsed document and
    the file's raw bytes."""
    out_dir.mkdir(parents=True, exist_ok=True)
    out = out_dir / f"cli-{data_file.stem}-{settings['seed']}.json"
    cmd = [str(binary), "sweep", str(data_file), *cli_flags(settings, data), "--out", str(out)]
    p = subprocess.run(cmd, capture_output=True, text=True, timeout=CLI_TIMEOUT)
    assert p.returncode == 0, f"{' '.join(cmd)}\nexit {p.returncode}\n{p.stderr}"
    raw = out.read_bytes()
    return json.loads(raw), raw


# ---- exact comparison ---------------------------------------------------------------------


def differences(a, b, path: str = "$") -> list[str]:
    """Every place where two parsed JSON documents differ. Stricter than ``==``: an int is not
    equal to a float, and floats must have the same bits (so 0.0 and -0.0 differ)."""
    import struct

    if type(a) is not type(b):
        return [f"{path}: {type(a).__name__} {a!r} vs {type(b).__name__} {b!r}"]
    if isinstance(a, dict):
        out = []
        for k in sorted(set(a) | set(b)):
            if k not in a:
                out.append(f"{path}.{k}: missing on the left")
            elif k not in b:
                out.append(f"{path}.{k}: missing on the right")
            else:
                out += differences(a[k], b[k], f"{path}.{k}")
        return out
    if isinstance(a, list):
        if len(a) != len(b):
            return [f"{path}: {len(a)} items vs {len(b)}"]
        out = []
        for i, (x, y) in enumerate(zip(a, b)):
            out += differences(x, y, f"{path}[{i}]")
        return out
    if isinstance(a, float):
        if struct.pack("<d", a) != struct.pack("<d", b):
            return [f"{path}: {a!r} vs {b!r}"]
        return []
    return [] if a == b else [f"{path}: {a!r} vs {b!r}"]


def assert_same_document(service: dict, cli: dict, what: str) -> None:
    diff = differences(service, cli)
    shown = "\n".join(diff[:30]) + (f"\n... and {len(diff) - 30} more" if len(diff) > 30 else "")
    assert not diff, f"{what}: the service's result differs from the CLI's (service vs CLI):\n{shown}"
