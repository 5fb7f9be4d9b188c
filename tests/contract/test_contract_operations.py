"""Every operation of api-spec/openapi.yaml, driven by schemathesis against the real server.

Schemathesis (https://schemathesis.readthedocs.io) generates requests from the spec, valid ones
and invalid ones, sends them to a running `mixgauge serve`, and checks each response against
the spec: no 5xx (`not_a_server_error`), a documented status (`status_code_conformance`), a
documented media type (`content_type_conformance`), the documented headers
(`response_headers_conformance`) and a body that validates against the response's schema
(`response_schema_conformance`), including the shared result and model JSON Schemas.

Generation is derandomized (Hypothesis's `derandomize`), so a run sends the same requests every
time. Half of the generated cases for routes that take an id are pointed at the seeded
dataset, sweep and models, so the "found" answers are checked as well as the "not found" ones.
"""

from __future__ import annotations

import os

import hypothesis.strategies as st
import pytest

from contract_support import SCORE_CSV, SCRATCH_CSV, SEED_SETTINGS
from spec_loading import CHECKS, load_spec

#: Generated cases per operation (fuzzing phase; the examples and coverage phases add their own).
#: 300 keeps the whole file near half a minute on two cores; raise it for a deeper local run.
MAX_EXAMPLES = int(os.environ.get("CONTRACT_MAX_EXAMPLES", "300"))

#: CI runs derandomized: the same requests every run. CONTRACT_SEED=<n> explores other ones
#: (a failure it finds is reproduced by the same seed).
SEED = os.environ.get("CONTRACT_SEED")
GENERATION = {"max-examples": MAX_EXAMPLES, "deterministic": SEED is None}

schema = load_spec(
    {
        "generation": GENERATION,
        **({"seed": int(SEED)} if SEED is not None else {}),
        "phases": {"stateful": {"enabled": False}},
        "suppress-health-check": ["too_slow", "filter_too_much", "data_too_large"],
    }
)

#: Filled by the `known` fixture before any case is generated; read by the hook below.
KNOWN: dict = {}


@schema.hook
def flatmap_case(context, case):
    """Half the cases keep what was generated; the other half are pointed at seeded things."""
    if not KNOWN:
        return st.just(case)
    label = f"{case.method.upper()} {case.operation.path}"
    return st.tuples(st.booleans(), st.integers(0, len(KNOWN["models"]) - 1)).map(
        lambda drawn: _point_at_seeded(label, case, drawn[1]) if drawn[0] else case
    )


def _point_at_seeded(label: str, case, model: int):
    path = case.path_parameters if case.path_parameters is not None else {}
    if label == "GET /v1/datasets/{id}":
        path["id"] = KNOWN["dataset"]
    elif label == "DELETE /v1/datasets/{id}":
        path["id"] = KNOWN["scratch_dataset"]
    elif label.startswith(("GET /v1/sweeps/{id}", "POST /v1/sweeps/{id}")):
        path["id"] = KNOWN["sweep"]
        if label.endswith("/models/{covariance}/{components}"):
            covariance, components = KNOWN["models"][model]
            path["covariance"], path["components"] = covariance, components
        if label.endswith("/score"):
            case.body = SCORE_CSV.decode()
            case.media_type = "text/csv"
    elif label == "POST /v1/sweeps" and isinstance(case.body, dict) and case.media_type == "application/json":
        case.body = {**case.body, "dataset": KNOWN["dataset"], "settings": dict(SEED_SETTINGS)}
    return case


def _prepare(case, service) -> None:
    if (
        case.method.upper() == "DELETE"
        and case.path_parameters
        and case.path_parameters.get("id") == service.scratch_dataset
    ):
        # Deleted by an earlier case, maybe: upload it again so this one finds it.
        service.server.upload(SCRATCH_CSV)


def _tidy(case, response, service) -> None:
    # A sweep the case queued would keep the one worker busy; cancel it (queued: at once).
    if case.method.upper() == "POST" and case.operation.path == "/v1/sweeps" and response.status_code == 202:
        status = service.server.cancel(response.json()["id"])
        assert status in (202, 409), f"cancelling a sweep the case queued answered {status}"


#: (operation, status) of every response the cases above got, for the coverage test below.
SEEN: set[tuple[str, int]] = set()


@pytest.fixture(scope="module")
def known(service):
    KNOWN.update(
        dataset=service.dataset,
        scratch_dataset=service.scratch_dataset,
        sweep=service.sweep,
        models=service.models,
    )
    yield KNOWN
    KNOWN.clear()


@schema.parametrize()
def test_operation_keeps_to_the_spec(case, service, known):
    _prepare(case, service)
    response = case.call_and_validate(base_url=service.url, checks=CHECKS, timeout=60)
    SEEN.add((f"{case.method.upper()} {case.operation.path}", response.status_code))
    _tidy(case, response, service)


#: Success answers the cases above must have reached (so they checked found resources, not
#: only refusals); each needs the seeded ids or one of the generated valid requests.
MUST_SUCCEED = {
    "GET /v1/datasets/{id}": {200},
    "DELETE /v1/datasets/{id}": {204},
    "GET /v1/sweeps/{id}": {200},
    "GET /v1/sweeps/{id}/report": {200},
    "GET /v1/sweeps/{id}/models/{covariance}/{components}": {200},
    "POST /v1/sweeps/{id}/score": {200},
    "POST /v1/sweeps": {200, 202},
    "GET /v1/datasets": {200},
    "GET /v1/sweeps": {200},
}


def test_the_cases_reached_found_resources(known):
    """Runs after the generated cases (pytest keeps file order): each route with an id was
    answered with success at least once, so its success schema was checked on a real body."""
    assert SEEN, "no generated case ran; run this file whole, not this test alone"
    missing = {
        op: want for op, want in MUST_SUCCEED.items()
        if not any((op, status) in SEEN for status in want)
    }
    assert not missing, f"never answered with success: {missing}; seen: {sorted(SEEN)}"
