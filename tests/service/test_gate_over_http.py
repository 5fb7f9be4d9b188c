"""`mixgauge gate --server` against a running service gives the same report as the local
gate on the profile the CLI writes for the same data, settings and seed.

Data: Palmer penguins as shipped by `palmerpenguins` (the ``penguins_csv`` fixture); the
reference is the Adélie and Chinstrap birds, the failing batch the Gentoo birds.
"""

from __future__ import annotations

import csv
import json
import subprocess

SETTINGS = {"components": [1, 2, 3], "covariances": ["full"], "folds": 3, "restarts": 2}
COLUMNS = ["bill_length_mm", "bill_depth_mm", "flipper_length_mm", "body_mass_g"]


def split(penguins_csv, folder):
    rows = list(csv.DictReader(penguins_csv.open()))
    out = {}
    for name, keep in [("reference", lambda r: r["species"] != "Gentoo"),
                       ("gentoo", lambda r: r["species"] == "Gentoo")]:
        path = folder / f"{name}.csv"
        with path.open("w", newline="") as f:
            w = csv.DictWriter(f, fieldnames=COLUMNS, extrasaction="ignore", lineterminator="\n")
            w.writeheader()
            w.writerows(r for r in rows if keep(r))
        out[name] = path
    return out


def gate(binary, *args):
    return subprocess.run([str(binary), "gate", *map(str, args)], capture_output=True,
                          text=True, timeout=120)


def test_the_remote_gate_equals_the_local_one(server, mixgauge_binary, penguins_csv, tmp_path):
    files = split(penguins_csv, tmp_path)
    dataset = server.upload(files["reference"])["id"]
    sweep = server.create_sweep(dataset, SETTINGS)
    server.wait_succeeded(sweep, timeout=120)

    profile = tmp_path / "profile.json"
    subprocess.run([str(mixgauge_binary), "sweep", files["reference"], "--components", "1..3",
                    "--covariance", "full", "--folds", "3", "--restarts", "2",
                    "--profile", profile, "--out", tmp_path / "result.json"],
                   check=True, capture_output=True, timeout=120)
    served = server.get(f"/v1/sweeps/{sweep}/profile").json()
    assert served == json.loads(profile.read_text())

    for batch, code in [(files["reference"], 0), (files["gentoo"], 1)]:
        remote = gate(mixgauge_binary, batch, "--reference", sweep, "--server", server.base,
                      "--format", "json")
        local = gate(mixgauge_binary, batch, "--reference", profile, "--format", "json")
        assert (remote.returncode, local.returncode) == (code, code), remote.stderr + local.stderr
        assert json.loads(remote.stdout) == json.loads(local.stdout)


def test_a_remote_gate_on_an_unknown_sweep_is_a_usage_error(server, mixgauge_binary, tmp_path):
    batch = tmp_path / "b.csv"
    batch.write_text("a\n1\n2\n")
    done = gate(mixgauge_binary, batch, "--reference", "sw-999", "--server", server.base)
    assert done.returncode == 2, done
    assert "sw-999" in done.stderr and "404" in done.stderr, done.stderr
