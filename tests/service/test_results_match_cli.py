"""The service's sweep result is the command line's result: same file, same settings, same
document, field for field and bit for bit.

Why: the engine is deterministic (same seed ⇒ same bits for any thread count), and the
service is meant to be the CLI behind HTTP. Any difference means the service reads the data,
resolves the settings or stores the document differently from `mixgauge sweep` — which would
make a team's numbers depend on how they ran the tool.

Fields that may legitimately differ: none. The result document holds no timings, paths or
host names (api-spec/result.schema.json), so every field is compared, floats by their bits.

Reference data: iris, as shipped with scikit-learn (`sklearn.datasets.load_iris`), and Palmer
penguins, as shipped with the PyPI package `palmerpenguins`, incomplete rows dropped in
pandas first.
"""

from __future__ import annotations

import json
import subprocess

import numpy as np
import pytest

from service_helpers import assert_same_document, cli_sweep

#: Every setting spelled out, small enough to run in a second.
IRIS_SETTINGS = {
    "components": [1, 2, 3],
    "covariances": ["full", "diagonal"],
    "folds": 3,
    "restarts": 2,
    "seed": 7,
    "tolerance": 1e-6,
    "max_iterations": 200,
    "ridge": {"kind": "relative", "value": 1e-6},
}

PENGUIN_FEATURES = ["bill_length_mm", "bill_depth_mm", "flipper_length_mm", "body_mass_g"]


def run_service_sweep(server, data_file, settings, data=None, timeout=120):
    ds = server.upload(data_file)
    sweep_id = server.create_sweep(ds["id"], settings, data)
    return ds, server.wait_succeeded(sweep_id, timeout)


def iris_as(fmt: str, iris_csv, tmp_path):
    """The same iris values as CSV (the file itself), NPY (`numpy.save`, float64) or JSON
    (an array of row objects keyed by the CSV header)."""
    if fmt == "csv":
        return iris_csv
    from sklearn.datasets import load_iris

    iris = load_iris()
    if fmt == "npy":
        path = tmp_path / "iris.npy"
        np.save(path, np.ascontiguousarray(iris.data, dtype="<f8"))
        return path
    path = tmp_path / "iris.json"
    rows = [dict(zip(iris.feature_names, map(float, r))) for r in iris.data]
    path.write_text(json.dumps(rows))
    return path


@pytest.mark.parametrize("fmt", ["csv", "npy", "json"])
def test_iris_sweep_over_http_equals_the_cli_document(server, mixgauge_binary, iris_csv,
                                                      tmp_path, fmt):
    """Iris (scikit-learn's copy) uploaded as CSV, NPY and JSON: each sweep's `result` is the
    document `mixgauge sweep FILE --out` writes for that same file and settings. Checks the
    upload path of each format reads exactly what the CLI reads."""
    data_file = iris_as(fmt, iris_csv, tmp_path)
    ds, sweep = run_service_sweep(server, data_file, IRIS_SETTINGS)
    assert ds["rows"] == 150 and ds["columns"] == 4, ds
    assert ds["format"] == fmt
    cli, _ = cli_sweep(mixgauge_binary, data_file, IRIS_SETTINGS, tmp_path)
    assert sweep["result"]["format"] == "mixgauge.sweep/1"
    assert_same_document(sweep["result"], cli, f"iris as {fmt}")
    # The sweep record echoes the resolved settings, and they are the ones the CLI used.
    assert sweep["settings"] == cli["settings"]


def test_default_settings_equal_the_cli_defaults(server, mixgauge_binary, iris_csv, tmp_path):
    """A sweep posted with no settings at all equals `mixgauge sweep FILE` with no flags:
    the service's defaults are the CLI's defaults (a silent drift here would make the two
    recommend different models for the same file)."""
    ds = server.upload(iris_csv)
    r = server.post("/v1/sweeps", json={"dataset": ds["id"]})
    assert r.status_code == 202, r.text
    sweep = server.wait_succeeded(r.json()["id"], 180)
    out = tmp_path / "cli-defaults.json"
    p = subprocess.run([str(mixgauge_binary), "sweep", str(iris_csv), "--out", str(out)],
                       capture_output=True, text=True, timeout=300)
    assert p.returncode == 0, p.stderr
    assert_same_document(sweep["result"], json.loads(out.read_text()), "iris, default settings")


def test_penguins_with_data_options_equals_the_cli_document(server, mixgauge_binary,
                                                            penguins_csv, tmp_path):
    """Palmer penguins (the `palmerpenguins` package's copy, incomplete rows dropped in
    pandas) with the sweep's `data` options — four named feature columns out of eight,
    `species` as labels, standardised — and an absolute ridge: the result equals
    `mixgauge sweep --columns ... --labels species --standardise --ridge ...`. Checks the
    HTTP data options mean what the CLI flags mean, label agreement scores included."""
    settings = {
        "components": [1, 2, 3, 4],
        "covariances": ["full", "diagonal"],
        "folds": 4,
        "restarts": 2,
        "seed": 11,
        "tolerance": 1e-7,
        "max_iterations": 300,
        "ridge": {"kind": "absolute", "value": 1e-4},
    }
    data = {"columns": PENGUIN_FEATURES, "labels": "species", "standardise": True}
    ds, sweep = run_service_sweep(server, penguins_csv, settings, data)
    assert ds["rows"] == 333, ds
    cli, _ = cli_sweep(mixgauge_binary, penguins_csv, settings, tmp_path, data)
    assert cli["dataset"]["column_names"] == PENGUIN_FEATURES
    assert cli["dataset"]["standardised"] is True
    fitted = [c for c in cli["candidates"] if c["status"] == "fitted"]
    assert fitted and all("labels" in c for c in fitted), "the labels were not used"
    assert_same_document(sweep["result"], cli, "penguins with data options")


def test_same_request_twice_gives_byte_identical_results(server, iris_csv):
    """Two separate jobs over the same dataset and settings (no idempotency key, so two jobs
    run) return identical documents: the service adds no per-run variation of its own."""
    ds = server.upload(iris_csv)
    first = server.create_sweep(ds["id"], IRIS_SETTINGS)
    second = server.create_sweep(ds["id"], IRIS_SETTINGS)
    assert first != second
    a = server.wait_succeeded(first, 120)
    b = server.wait_succeeded(second, 120)
    assert_same_document(a["result"], b["result"], "the same sweep run twice")
    ra = server.get(f"/v1/sweeps/{first}/report")
    rb = server.get(f"/v1/sweeps/{second}/report")
    assert ra.status_code == rb.status_code == 200
    assert ra.content == rb.content


def test_penguins_with_gaps_and_drop_incomplete_equals_the_cli_document(
        server, mixgauge_binary, tmp_path):
    """Palmer penguins as the `palmerpenguins` package ships it, gaps and all, uploaded as it is and swept with `data.drop_incomplete`:
    the result equals `mixgauge sweep --drop-incomplete` on the same file. The contract gives
    `drop_incomplete` the CLI flag's meaning, so a file with gaps must be accepted for it."""
    from palmerpenguins import load_penguins

    path = tmp_path / "penguins-with-gaps.csv"
    df = load_penguins()
    df.to_csv(path, index=False, lineterminator="\n")
    gaps = int(df[PENGUIN_FEATURES].isna().any(axis=1).sum())  # counted by pandas
    settings = dict(IRIS_SETTINGS, seed=13)
    data = {"columns": PENGUIN_FEATURES, "drop_incomplete": True}
    cli, _ = cli_sweep(mixgauge_binary, path, settings, tmp_path, data)
    assert gaps > 0 and cli["dataset"]["dropped_rows"] == gaps
    r = server.post("/v1/datasets", data=path.read_bytes(), headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, f"upload of penguins with gaps: {r.status_code} {r.text}"
    sweep_id = server.create_sweep(r.json()["id"], settings, data)
    sweep = server.wait_succeeded(sweep_id, 120)
    assert_same_document(sweep["result"], cli, "penguins with gaps, drop_incomplete")
