"""One API process and three workers on PostgreSQL run a sweep of more than 200 fit tasks;
a worker holding a lease is killed with SIGKILL midway. The sweep must still succeed, its
stored result document and report must be byte-identical to a single-process run (the
embedded store) with the same seed, and every task's result must have been recorded exactly
once: one accepted report per task, `done` equal to the task count, and the killed worker's
task fitted again by another worker after its lease ran out.
"""

from __future__ import annotations

import hashlib
import os
import sqlite3
from pathlib import Path

from cluster_harness import Cluster, start_sweep, upload, wait_final
from mixgauge_under_test import ServeProcess

#: 9 component counts × 2 covariance forms × 2 restarts × (5 folds + all rows) = 216 fits.
SETTINGS = {"components": list(range(1, 10)), "restarts": 2, "folds": 5, "seed": 29}
DATA = {"labels": "regime"}
TASKS = 9 * 2 * 2 * 6


def embedded_run(binary: Path, workdir: Path, csv: Path, settings: dict = SETTINGS,
                 data: dict = DATA) -> tuple[str, str]:
    """A sweep in one process on the embedded store: (result, report) as stored."""
    server = ServeProcess(binary, workdir / "single", workdir / "single.log").start()
    try:
        sweep = start_sweep(server, upload(server, csv), settings, data)
        job = wait_final(server, sweep)
        assert job["state"] == "succeeded", job
    finally:
        server.stop()
    db = sqlite3.connect(workdir / "single" / "mixgauge.sqlite3")
    result, report = db.execute("SELECT result, report FROM sweeps").fetchone()
    db.close()
    return result, report


def md5(text: str) -> str:
    return hashlib.md5(text.encode("utf-8")).hexdigest()


def test_a_killed_worker_loses_no_fit_and_doubles_none(mixgauge_binary, demo_csv, tmp_path):
    result, report = embedded_run(mixgauge_binary, tmp_path, demo_csv)

    cluster = Cluster(mixgauge_binary, tmp_path / "cluster",
                      schema=f"cluster_kill_{os.getpid()}", workers=3, lease=3.0)
    try:
        sweep = start_sweep(cluster.api, upload(cluster.api, demo_csv), SETTINGS, DATA)
        killed: dict[str, object] = {}

        def kill_a_holder_midway(job):
            if killed or job["state"] != "running":
                return
            progress = job.get("progress") or {}
            if progress.get("total") != TASKS or progress.get("done", 0) < TASKS // 4:
                return
            # A worker is between two tasks only for a moment; if the one killed held no
            # lease when it died, kill another (one is always left alive).
            for victim in cluster.workers[:2]:
                victim.kill()
                stranded = cluster.sql(
                    f"SELECT task FROM fit_tasks WHERE holder = '{victim.name}' "
                    "AND state = 'leased'"
                ).split()
                if stranded:
                    killed.update(name=victim.name, tasks=[int(t) for t in stranded],
                                  done=progress["done"])
                    return
            raise AssertionError("no killed worker held a lease")

        job = wait_final(cluster.api, sweep, on_progress=kill_a_holder_midway)
        assert killed, "the sweep ended before a quarter of it was done"
        assert job["state"] == "succeeded", job
        assert job["progress"] == {"done": TASKS, "total": TASKS}, job["progress"]

        # Byte-identical to the single-process run.
        stored = cluster.sql("SELECT md5(result) || ' ' || md5(report) FROM sweeps")
        assert stored == f"{md5(result)} {md5(report)}"

        # Every task recorded once; the killed worker's task done again by another worker.
        counts = cluster.sql(
            "SELECT COUNT(*), SUM(reports), MIN(reports), MAX(reports), "
            "COUNT(*) FILTER (WHERE state IN ('done', 'failed')) FROM fit_tasks"
        )
        assert counts == f"{TASKS}|{TASKS}|1|1|{TASKS}", counts
        for task in killed["tasks"]:
            row = cluster.sql(f"SELECT attempts, state FROM fit_tasks WHERE task = {task}")
            attempts, state = row.split("|")
            assert int(attempts) >= 2 and state in ("done", "failed"), \
                f"the killed worker's task {task} was not fitted again: {row}"
        survivors = [w for w in cluster.workers if w.proc.poll() is None]
        reported = sum(w.metrics(cluster.api.http)["mixgauge_worker_tasks_total"]
                       for w in survivors)
        assert 0 < reported < TASKS
        print(f"\nkilled {killed['name']} holding task(s) {killed['tasks']} at "
              f"{killed['done']}/{TASKS} done; the survivors reported {int(reported)} "
              f"tasks, the killed worker(s) {TASKS - int(reported)} before dying")
    finally:
        cluster.stop()
