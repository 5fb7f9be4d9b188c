"""The documents the CLI writes conform to the published JSON Schemas in api-spec/
(validated with the `jsonschema` package, JSON Schema draft 2020-12), and model documents
round-trip exactly through the CLI."""

import json
from pathlib import Path

import jsonschema
import numpy as np
import pytest

from support import sample, random_covariances, random_weights, separated_means

SPEC = Path(__file__).resolve().parents[2] / "api-spec"


def validator(name: str) -> jsonschema.Draft202012Validator:
    schema = json.loads((SPEC / name).read_text())
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


def data(seed: int, d: int = 3, k: int = 3, n: int = 600) -> np.ndarray:
    """Invented test input: a seeded, well-separated full-covariance mixture."""
    rng = np.random.default_rng(seed)
    covs = random_covariances(rng, "full", k, d, condition=10.0)
    means, _ = separated_means(rng, "full", covs, separation=3.0)
    return sample(rng, "full", random_weights(rng, k), means, covs, n)[0]


@pytest.mark.parametrize("form", ["full", "diagonal"])
def test_model_documents_match_their_schema(mixgauge, form):
    doc = mixgauge.fit(data(1), 3, form)
    validator("model.schema.json").validate(doc)
    assert doc["fitted"]["trace"][-1] == doc["fitted"]["mean_loglik"]


def test_a_saved_model_scores_identically_after_a_round_trip(mixgauge):
    x = data(2)
    doc = mixgauge.fit(x, 2, "full")
    first = mixgauge.score(x, doc)
    # Re-serialise through Python's float repr (also shortest round-trip) and score again.
    again = mixgauge.score(x, json.loads(json.dumps(doc)))
    assert np.array_equal(first.loglik, again.loglik)


def test_sweep_results_match_their_schema(mixgauge):
    path = mixgauge.write_data(data(3, n=400))
    out = mixgauge.workdir / "sweep.json"
    mixgauge.run("sweep", path, "--components", "1..4", "--restarts", "2", "--out", out)
    result = json.loads(out.read_text())
    validator("result.schema.json").validate(result)
    assert len(result["candidates"]) == 8
