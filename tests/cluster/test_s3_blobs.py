"""The S3-compatible blob location: with ``--blobs s3://bucket/prefix`` and the standard
``AWS_*`` settings, the API stores an upload in the bucket under ``prefix/datasets/<sha256>``,
workers fetch it from there into their caches, and the sweep's stored result is byte-identical
to the same sweep in a single process on the embedded store. The S3 server is moto's (a
general-purpose AWS mock from PyPI), run locally.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import requests

from cluster_harness import Cluster, start_sweep, upload, wait_final
from mixgauge_under_test import free_port
from test_kill_a_worker import embedded_run, md5

SETTINGS = {"components": [1, 2, 3, 4], "restarts": 1, "folds": 5, "seed": 3}
DATA = {"labels": "regime"}


def moto_server(port: int, log: Path) -> subprocess.Popen:
    exe = shutil.which("moto_server", path=str(Path(sys.executable).parent)) or "moto_server"
    proc = subprocess.Popen([exe, "-p", str(port)], stdout=open(log, "wb"),
                            stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL)
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        try:
            requests.get(f"http://127.0.0.1:{port}/", timeout=1)
            return proc
        except requests.RequestException:
            time.sleep(0.1)
    proc.kill()
    raise RuntimeError(f"moto_server did not start:\n{log.read_text()}")


def test_datasets_travel_through_an_s3_bucket(mixgauge_binary, demo_csv, tmp_path):
    result, _report = embedded_run(mixgauge_binary, tmp_path, demo_csv, SETTINGS, DATA)

    port = free_port()
    s3 = moto_server(port, tmp_path / "moto.log")
    endpoint = f"http://127.0.0.1:{port}"
    try:
        assert requests.put(f"{endpoint}/reefer-fleet", timeout=10).status_code == 200
        env = dict(os.environ, AWS_ENDPOINT=endpoint, AWS_ALLOW_HTTP="true",
                   AWS_ACCESS_KEY_ID="local", AWS_SECRET_ACCESS_KEY="local",
                   AWS_REGION="us-east-1")
        cluster = Cluster(mixgauge_binary, tmp_path / "cluster",
                          schema=f"cluster_s3_{os.getpid()}", workers=2, lease=10,
                          blobs="s3://reefer-fleet/mixgauge", env=env)
        try:
            dataset = upload(cluster.api, demo_csv)
            sha = hashlib.sha256(demo_csv.read_bytes()).hexdigest()
            listing = requests.get(f"{endpoint}/reefer-fleet?list-type=2", timeout=10).text
            assert f"<Key>mixgauge/datasets/{sha}</Key>" in listing, listing
            job = wait_final(cluster.api, start_sweep(cluster.api, dataset, SETTINGS, DATA))
            assert job["state"] == "succeeded", job
            assert cluster.sql("SELECT md5(result) FROM sweeps") == md5(result)
            cached = [w for w in ("w1", "w2")
                      if (cluster.workdir / f"cache-{w}" / sha).exists()]
            assert cached, "no worker kept the fetched dataset in its cache"
            for w in cached:
                assert hashlib.sha256(
                    (cluster.workdir / f"cache-{w}" / sha).read_bytes()).hexdigest() == sha
        finally:
            cluster.stop()
    finally:
        s3.kill()
        s3.wait(timeout=10)
