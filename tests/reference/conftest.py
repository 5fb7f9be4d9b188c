"""Running the mixgauge CLI from the reference tests.

The binary is ``$MIXGAUGE_BIN`` when set, else ``<repo>/target/release/mixgauge``, found by
``tests/mixgauge_under_test.py`` (shared by the Python suites). A missing binary fails every
test that needs it (it is never skipped).

Data go to the CLI as ``.npy`` files written by ``numpy.save`` (float64, C order), so the
engine sees exactly the values the reference libraries see. Model documents are written with
Python's ``json`` module, whose float output is the shortest round-trip form.
"""

from __future__ import annotations

import csv
import json
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import numpy as np
import pytest

# The session fixture `mixgauge_binary` and the report header line, shared by the suites.
from mixgauge_under_test import mixgauge_binary, pytest_report_header  # noqa: F401

#: Seconds a single CLI call may take before the test fails.
CALL_TIMEOUT = 120


@dataclass
class ScoreResult:
    """What ``mixgauge score --out rows.csv --json`` reports."""

    loglik: np.ndarray  # per-row log-density, nats
    component: np.ndarray  # per-row most responsible component
    summary: dict  # rows, loglik, mean_loglik, free_parameters, bic, aic, icl, entropy


class Mixgauge:
    """Runs the CLI with files kept in one test's tmp_path."""

    def __init__(self, binary: Path, workdir: Path):
        self.binary = binary
        self.workdir = workdir
        self._count = 0

    def _path(self, stem: str, suffix: str) -> Path:
        self._count += 1
        return self.workdir / f"{stem}-{self._count}{suffix}"

    def run(self, *args, expect: int = 0) -> subprocess.CompletedProcess:
        """Runs ``mixgauge ARGS`` and fails the test unless it exits with ``expect``."""
        argv = [str(self.binary), *map(str, args)]
        done = subprocess.run(argv, capture_output=True, text=True, timeout=CALL_TIMEOUT)
        if done.returncode != expect:
            pytest.fail(
                f"`{' '.join(argv)}` exited with {done.returncode} (expected {expect})\n"
                f"stderr:\n{done.stderr}\nstdout (first 2000 chars):\n{done.stdout[:2000]}",
                pytrace=False,
            )
        return done

    def write_data(self, x: np.ndarray) -> Path:
        """Writes a 2-D float64 array as .npy (exact transfer of every value)."""
        x = np.ascontiguousarray(x, dtype=np.float64)
        assert x.ndim == 2, "the CLI reads 2-D tables"
        path = self._path("data", ".npy")
        np.save(path, x)
        return path

    def write_model(self, doc: dict) -> Path:
        path = self._path("model", ".json")
        path.write_text(json.dumps(doc, indent=1))
        return path

    @staticmethod
    def _options(options: dict) -> list[str]:
        """Python keyword arguments as our CLI options: ``max_iterations=1`` becomes
        ``--max-iterations 1``; ``True`` becomes a bare flag."""
        argv = []
        for name, value in options.items():
            flag = "--" + name.replace("_", "-")
            if value is True:
                argv.append(flag)
            elif value is False or value is None:
                continue
            else:
                argv += [flag, repr(value) if isinstance(value, float) else str(value)]
        return argv

    def fit(self, x: np.ndarray, components: int, covariance: str = "full", **options) -> dict:
        """``mixgauge fit`` on ``x``; returns the model document it wrote."""
        data = self.write_data(x)
        out = self._path("fitted", ".json")
        if isinstance(options.get("start"), dict):
            options["start"] = self.write_model(options["start"])
        self.run(
            "fit", data, "--components", components, "--covariance", covariance,
            *self._options(options), "--out", out,
        )
        return json.loads(out.read_text())

    def score(self, x: np.ndarray, model: dict | Path) -> ScoreResult:
        """``mixgauge score --json --out rows.csv`` on ``x``."""
        data = self.write_data(x)
        model_path = model if isinstance(model, Path) else self.write_model(model)
        rows_path = self._path("rows", ".csv")
        done = self.run("score", data, "--model", model_path, "--out", rows_path, "--json")
        summary = json.loads(done.stdout)
        with rows_path.open(newline="") as f:
            reader = csv.reader(f)
            header = next(reader)
            assert header == ["row", "loglik", "component"], header
            records = list(reader)
        assert [int(r[0]) for r in records] == list(range(len(x))), "rows out of order"
        # float() parses the shortest round-trip text back to the exact double.
        loglik = np.array([float(r[1]) for r in records])
        component = np.array([int(r[2]) for r in records])
        return ScoreResult(loglik=loglik, component=component, summary=summary)


@pytest.fixture
def mixgauge(mixgauge_binary: Path, tmp_path: Path) -> Mixgauge:
    return Mixgauge(mixgauge_binary, tmp_path)
