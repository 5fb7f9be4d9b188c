"""The job queue survives its process: a kill -9 or a SIGTERM in the middle of a sweep loses
no job and changes no finished result, and many sweeps at once all finish.

Why: a sweep can run for minutes; the service must not leave a team with a job stuck in
`running`, a half-written result, or a finished result that changed after a restart.

The long sweep runs over the demo data (invented refrigerated-trailer telemetry committed in
demo-data/, made by `mixgauge demo`): here any data will do, and the expected result is not an
answer about the data but the result of the same sweep run without interruption by the CLI.
The short sweeps use iris, as shipped with scikit-learn.
"""

from __future__ import annotations

import threading
import time

import pytest
import requests

from service_helpers import Server, assert_same_document, cli_sweep

#: About 15 s on two cores: long enough to be caught mid-run, short enough to run twice.
LONG_SETTINGS = {
    "components": [1, 2, 3, 4, 5, 6, 7, 8],
    "covariances": ["full", "diagonal"],
    "folds": 3,
    "restarts": 4,
    "seed": 3,
    "tolerance": 1e-8,
    "max_iterations": 400,
    "ridge": {"kind": "relative", "value": 1e-6},
}

SHORT_SETTINGS = {
    "components": [1, 2, 3],
    "covariances": ["full", "diagonal"],
    "folds": 3,
    "restarts": 1,
    "seed": 5,
    "tolerance": 1e-6,
    "max_iterations": 200,
    "ridge": {"kind": "relative", "value": 1e-6},
}

#: Seconds a long sweep may take, however loaded the machine.
LONG_TIMEOUT = 180


def mid_run(s: dict) -> bool:
    """Running, with at least a fifth of the fits done and some left: well inside the run."""
    p = s["progress"]
    return s["state"] == "running" and 0 < p["total"] / 5 <= p["done"] < p["total"]


@pytest.fixture(scope="module")
def long_reference(mixgauge_binary, demo_csv, tmp_path_factory) -> dict:
    """The long sweep's document as the CLI writes it, never interrupted."""
    doc, _ = cli_sweep(mixgauge_binary, demo_csv, LONG_SETTINGS,
                       tmp_path_factory.mktemp("long-reference"))
    return doc


@pytest.fixture(scope="module")
def killed_run(mixgauge_binary, demo_csv, iris_csv, tmp_path_factory):
    """One server over one data folder: a short sweep finishes, a long sweep starts, the
    server is killed with SIGKILL mid-run and started again over the same folder, and the
    long sweep is followed to its end. Returns what was seen at each step."""
    root = tmp_path_factory.mktemp("killed")
    (root / "logs").mkdir()
    server = Server(mixgauge_binary, root / "data", root / "logs", workers=1, args=[])
    server.start()
    seen: dict = {}
    try:
        iris = server.upload(iris_csv)
        done_id = server.create_sweep(iris["id"], SHORT_SETTINGS)
        server.wait_succeeded(done_id, 60)
        seen["done_id"] = done_id
        seen["done_before"] = server.get(f"/v1/sweeps/{done_id}").content
        seen["report_before"] = server.get(f"/v1/sweeps/{done_id}/report").content

        demo = server.upload(demo_csv)
        long_id = server.create_sweep(demo["id"], LONG_SETTINGS)
        seen["long_id"] = long_id
        seen["at_kill"] = server.wait_until(long_id, mid_run, 60, interval=0.05)
        server.kill()

        server.start()
        seen["done_after_restart"] = server.get(f"/v1/sweeps/{done_id}").content
        states = []
        deadline = time.monotonic() + LONG_TIMEOUT
        while time.monotonic() < deadline:
            s = server.sweep(long_id)
            if not states or states[-1] != s["state"]:
                states.append(s["state"])
            if s["state"] in ("succeeded", "failed", "cancelled"):
                break
            time.sleep(0.1)
        seen["states_after_restart"] = states
        seen["long_final"] = s
        seen["done_after"] = server.get(f"/v1/sweeps/{done_id}").content
        seen["report_after"] = server.get(f"/v1/sweeps/{done_id}/report").content
        seen["log"] = server.log()
    finally:
        server.stop()
    return seen


def test_killed_sweep_is_taken_up_again_and_succeeds(killed_run):
    """After SIGKILL mid-run and a restart over the same data folder, the interrupted sweep is
    running again (not left `running` by a dead process forever, not failed) and then
    succeeds."""
    at_kill = killed_run["at_kill"]
    assert mid_run(at_kill), at_kill
    states = killed_run["states_after_restart"]
    assert "running" in states, f"states seen after the restart: {states}"
    final = killed_run["long_final"]
    assert final["state"] == "succeeded", (
        f"states after the restart {states}; error {final.get('error')}\n{killed_run['log']}"
    )
    assert final["progress"]["done"] == final["progress"]["total"]


def test_killed_sweep_result_equals_an_uninterrupted_run(killed_run, long_reference):
    """The interrupted-then-resumed sweep's result equals the CLI's result for the same data
    and settings, run without interruption: nothing from the killed run leaks into it."""
    final = killed_run["long_final"]
    assert final["state"] == "succeeded", final.get("error")
    assert_same_document(final["result"], long_reference, "sweep resumed after kill -9")


def test_finished_sweep_is_unchanged_by_a_kill_and_restart(killed_run):
    """A sweep that had succeeded before the kill answers GET /v1/sweeps/{id} and its report
    with the very same bytes after the restart and after the interrupted sweep finished:
    finished results are never changed."""
    before = killed_run["done_before"]
    assert killed_run["done_after_restart"] == before
    assert killed_run["done_after"] == before
    assert killed_run["report_after"] == killed_run["report_before"]
    assert killed_run["report_before"].lstrip().lower().startswith(b"<!doctype html")


def test_sigterm_mid_sweep_exits_promptly_and_the_sweep_completes_after_restart(
        start_server, demo_csv, long_reference):
    """SIGTERM while a sweep runs: the process exits within 10 s (a supervisor's usual
    grace), and after a restart over the same folder the sweep runs again and succeeds with
    the uninterrupted result. The contract says SIGTERM puts running sweeps back in the
    queue."""
    server = start_server()
    demo = server.upload(demo_csv)
    sweep_id = server.create_sweep(demo["id"], LONG_SETTINGS)
    server.wait_until(sweep_id, mid_run, 60, interval=0.05)
    took = server.terminate(timeout=10)
    assert server.proc.returncode == 0, f"exit status {server.proc.returncode}\n{server.log()}"
    server.start()
    first = server.sweep(sweep_id)
    assert first["state"] in ("queued", "running"), first
    final = server.wait_final(sweep_id, LONG_TIMEOUT)
    assert final["state"] == "succeeded", f"{final.get('error')}\n{server.log()}"
    assert_same_document(final["result"], long_reference, "sweep resumed after SIGTERM")
    print(f"exit after SIGTERM took {took:.2f} s")


def test_twenty_sweeps_submitted_at_once_all_succeed(start_server, mixgauge_binary, iris_csv,
                                                     tmp_path):
    """20 threads each upload the same iris file (scikit-learn's copy) and post a sweep with
    their own seed, all at once, to a server with two workers. Every upload gets the same
    dataset id (exactly one creates it), every sweep gets its own id and succeeds, and each
    result equals the CLI's for that seed: concurrency changes nothing in a result."""
    server = start_server(workers=2)
    n = 20
    barrier = threading.Barrier(n)
    out: list[dict | None] = [None] * n
    body = iris_csv.read_bytes()

    def submit(i: int) -> None:
        with requests.Session() as http:
            barrier.wait()
            up = http.post(server.url("/v1/datasets"), data=body,
                           headers={"Content-Type": "text/csv"}, timeout=60)
            settings = dict(SHORT_SETTINGS, seed=100 + i)
            sw = None
            if up.status_code in (200, 201):
                sw = http.post(server.url("/v1/sweeps"),
                               json={"dataset": up.json()["id"], "settings": settings},
                               timeout=60)
            out[i] = {"upload": up, "sweep": sw, "settings": settings}

    threads = [threading.Thread(target=submit, args=(i,)) for i in range(n)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(120)
    assert all(o is not None for o in out), "a submitting thread did not finish"

    statuses = sorted(o["upload"].status_code for o in out)
    assert set(statuses) <= {200, 201}, [o["upload"].text for o in out]
    assert statuses.count(201) == 1, f"upload statuses {statuses}: exactly one should create"
    assert len({o["upload"].json()["id"] for o in out}) == 1
    for o in out:
        assert o["sweep"].status_code == 202, o["sweep"].text
    ids = [o["sweep"].json()["id"] for o in out]
    assert len(set(ids)) == n

    for o, sweep_id in zip(out, ids):
        s = server.wait_succeeded(sweep_id, 120)
        cli, _ = cli_sweep(mixgauge_binary, iris_csv, o["settings"], tmp_path)
        assert_same_document(s["result"], cli, f"{sweep_id} (seed {o['settings']['seed']})")
    listed = server.get("/v1/sweeps?limit=100").json()["items"]
    assert {s["id"] for s in listed} >= set(ids)
    assert all(s["state"] == "succeeded" for s in listed)
