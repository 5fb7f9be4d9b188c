"""Answers that generated requests reach only by luck, set up on purpose and checked against
the spec with the same schemathesis checks: a sweep in progress (409s, cancel), idempotent
creation, the seeded sweep's report, models and scores, page revalidation (304), the upload
and body limits, and access tokens (401 exactly where the spec says so).

Each test asserts the status it set up, then lets schemathesis check that status, its media
type, headers and body against api-spec/openapi.yaml.
"""

from __future__ import annotations

import json
import shutil

import pytest

from contract_support import (
    BUSY_SETTINGS,
    SCORE_CSV,
    SEED_SETTINGS,
    SPEC_DIR,
    table_csv,
    two_groups,
)
from spec_loading import CHECKS, load_spec

schema = load_spec()


def call(base_url: str, method: str, path: str, expect: int, **case_args):
    """Sends one request built from the spec's operation and checks the response against it."""
    case = schema[path][method].Case(**case_args)
    response = case.call_and_validate(base_url=base_url, checks=CHECKS, timeout=60)
    assert response.status_code == expect, f"{method} {path}: {response.status_code} {response.text[:500]}"
    return response


def error_code(response) -> str:
    return response.json()["error"]["code"]


def header(response, name: str) -> str:
    """One header of a schemathesis response (its headers map lower-case names to lists)."""
    values = response.headers[name.lower()]
    return values[0] if isinstance(values, list) else values


def test_uploads_answer_201_then_200_for_the_same_bytes(service):
    body = table_csv(["p", "q", "r"], [(i, i * 0.5, 3.0 - i) for i in range(10)]).decode()
    first = call(service.url, "POST", "/v1/datasets", 201, body=body, media_type="text/csv")
    again = call(service.url, "POST", "/v1/datasets", 200, body=body, media_type="text/csv")
    assert first.json()["id"] == again.json()["id"]
    form = call(service.url, "POST", "/v1/datasets", 200, body={"file": body.encode()},
                media_type="multipart/form-data", multipart_content_types={"file": "text/csv"})
    assert form.json()["id"] == first.json()["id"]
    listed = call(service.url, "GET", "/v1/datasets", 200, query={"limit": 1})
    assert len(listed.json()["items"]) == 1 and listed.json()["next"] is not None


def test_bodies_over_the_limits_and_of_unknown_types_are_refused(service):
    too_big = "a,b\n" + "1.0,2.0\n" * 10_000  # 80 kB over the contract server's 64 KiB limit
    r = call(service.url, "POST", "/v1/datasets", 413, body=too_big, media_type="text/csv")
    assert error_code(r) == "body_too_large"
    r = call(service.url, "POST", "/v1/sweeps", 413, media_type="application/json",
             body={"dataset": service.dataset, "data": {"columns": ["c" * 1000] * 70}})
    assert error_code(r) == "body_too_large"
    r = call(service.url, "POST", "/v1/datasets", 415, body=b"\x00\x01 not npy",
             media_type="application/octet-stream")
    assert error_code(r) == "unsupported_media_type"
    r = call(service.url, "POST", "/v1/datasets", 422, body="a,b\n1,2\n3,4,5\n", media_type="text/csv")
    assert error_code(r) == "invalid_dataset"


def test_a_sweep_too_large_to_run_is_refused_before_it_is_queued(service):
    """Listing 10^12 restarts' fits would exhaust the server's memory (and could not be
    cancelled while it did): the request is refused instead of accepted."""
    body = {"dataset": service.dataset, "settings": {**SEED_SETTINGS, "restarts": 10**12}}
    r = call(service.url, "POST", "/v1/sweeps", 422, media_type="application/json", body=body)
    assert error_code(r) == "too_many_fits"
    assert r.json()["error"]["detail"] == {"field": "settings.restarts", "limit": 1_000_000}


def test_a_sweep_in_progress_holds_its_dataset_and_can_be_cancelled(service):
    busy_csv = table_csv(["a", "b"], two_groups(30, 4.0, 11)).decode()
    dataset = call(service.url, "POST", "/v1/datasets", 201, body=busy_csv, media_type="text/csv").json()["id"]
    created = call(service.url, "POST", "/v1/sweeps", 202, media_type="application/json",
                   body={"dataset": dataset, "settings": BUSY_SETTINGS})
    sweep = created.json()["id"]
    assert header(created, "Location") == f"/v1/sweeps/{sweep}"
    try:
        r = call(service.url, "DELETE", "/v1/datasets/{id}", 409, path_parameters={"id": dataset})
        assert error_code(r) == "dataset_in_use" and sweep in r.json()["error"]["detail"]["sweeps"]
        ids = {"id": sweep}
        r = call(service.url, "GET", "/v1/sweeps/{id}/report", 409, path_parameters=ids)
        assert error_code(r) == "sweep_not_succeeded"
        r = call(service.url, "GET", "/v1/sweeps/{id}/models/{covariance}/{components}", 409,
                 path_parameters={**ids, "covariance": "full", "components": 1})
        assert error_code(r) == "sweep_not_succeeded"
        r = call(service.url, "POST", "/v1/sweeps/{id}/score", 409, path_parameters=ids,
                 body=SCORE_CSV.decode(), media_type="text/csv")
        assert error_code(r) == "sweep_not_succeeded"
        r = call(service.url, "GET", "/v1/sweeps/{id}", 200, path_parameters=ids)
        assert r.json()["state"] in ("queued", "running") and "result" not in r.json()
    finally:
        r = call(service.url, "POST", "/v1/sweeps/{id}/cancel", 202, path_parameters={"id": sweep})
    assert r.json()["state"] == "cancelled" or r.json()["cancel_requested"] is True
    assert service.server.wait_for(sweep, {"cancelled"}, timeout=60)["state"] == "cancelled"
    call(service.url, "POST", "/v1/sweeps/{id}/cancel", 202, path_parameters={"id": sweep})
    call(service.url, "DELETE", "/v1/datasets/{id}", 204, path_parameters={"id": dataset})
    call(service.url, "GET", "/v1/datasets/{id}", 404, path_parameters={"id": dataset})


def test_an_idempotency_key_finds_the_earlier_sweep_and_refuses_another_request(service):
    settings = {**SEED_SETTINGS, "seed": 7}
    body = {"dataset": service.dataset, "settings": settings}
    key = {"Idempotency-Key": "contract-test-key-1"}
    first = call(service.url, "POST", "/v1/sweeps", 202, media_type="application/json", body=body, headers=key)
    # The same request, with a default spelled out: the same resolved request.
    same = {**body, "settings": {**settings, "tolerance": 1e-6}}
    again = call(service.url, "POST", "/v1/sweeps", 200, media_type="application/json", body=same, headers=key)
    assert again.json()["id"] == first.json()["id"]
    other = {**body, "settings": {**settings, "seed": 8}}
    r = call(service.url, "POST", "/v1/sweeps", 409, media_type="application/json", body=other, headers=key)
    assert error_code(r) == "idempotency_key_reused"
    # A form carries the file and, in its `request` part, the rest of the request.
    form = call(service.url, "POST", "/v1/sweeps", 202, media_type="multipart/form-data",
                body={"file": SCORE_CSV, "request": {"settings": {**SEED_SETTINGS, "folds": 3}}},
                multipart_content_types={"file": "text/csv", "request": "application/json"})
    for created in (first, form):
        service.server.wait_for(created.json()["id"], {"succeeded"}, timeout=60)


def test_the_finished_sweep_offers_its_report_models_and_scores(service):
    ids = {"id": service.sweep}
    doc = call(service.url, "GET", "/v1/sweeps/{id}", 200, path_parameters=ids).json()
    assert doc["state"] == "succeeded" and doc["result"]["format"] == "mixgauge.sweep/1"
    report = call(service.url, "GET", "/v1/sweeps/{id}/report", 200, path_parameters=ids)
    assert "<html" in report.text.lower()
    for covariance, components in service.models:
        model = call(service.url, "GET", "/v1/sweeps/{id}/models/{covariance}/{components}", 200,
                     path_parameters={**ids, "covariance": covariance, "components": components}).json()
        assert (model["covariance"], model["components"]) == (covariance, components)
    call(service.url, "GET", "/v1/sweeps/{id}/models/{covariance}/{components}", 404,
         path_parameters={**ids, "covariance": "full", "components": 9})
    chosen = call(service.url, "POST", "/v1/sweeps/{id}/score", 200, path_parameters=ids,
                  body=SCORE_CSV.decode(), media_type="text/csv").json()
    pick = doc["result"]["recommendations"]["heldout_one_se"]
    assert chosen["model"] == {**pick, "chosen_by": "heldout_one_se"}
    assert len(chosen["per_row"]["loglik"]) == chosen["rows"] == 6
    named = call(service.url, "POST", "/v1/sweeps/{id}/score", 200, path_parameters=ids,
                 query={"covariance": "full", "components": 1, "per_row": "false"},
                 body=SCORE_CSV.decode(), media_type="text/csv").json()
    assert named["model"]["chosen_by"] == "named" and "per_row" not in named
    r = call(service.url, "POST", "/v1/sweeps/{id}/score", 400, path_parameters=ids,
             query={"covariance": "full"}, body=SCORE_CSV.decode(), media_type="text/csv")
    assert error_code(r) == "bad_query"
    r = call(service.url, "POST", "/v1/sweeps/{id}/score", 422, path_parameters=ids,
             body="x,y\n1,2\n", media_type="text/csv")
    assert error_code(r) == "columns_do_not_match"
    r = call(service.url, "POST", "/v1/sweeps/{id}/cancel", 409, path_parameters=ids)
    assert error_code(r) == "sweep_finished"
    listed = call(service.url, "GET", "/v1/sweeps", 200, query={"limit": 100}).json()
    assert service.sweep in [s["id"] for s in listed["items"]]


@pytest.mark.parametrize("path", ["/", "/ui/app.js", "/ui/style.css"])
def test_the_page_and_its_assets_answer_304_to_their_own_etag(service, path):
    first = call(service.url, "GET", path, 200)
    tag = header(first, "ETag")
    call(service.url, "GET", path, 304, headers={"If-None-Match": tag})
    call(service.url, "GET", "/favicon.ico", 204)


def test_responses_are_checked_against_the_shared_json_schemas(service, tmp_path):
    """The spec refers to ./result.schema.json and ./model.schema.json; a copy of the spec
    folder whose result schema demands one more field must make the real response fail, so
    the checks above did read those files (and did not skip an unresolved reference)."""
    copy = tmp_path / "api-spec"
    shutil.copytree(SPEC_DIR, copy)
    strict = json.loads((copy / "result.schema.json").read_text())
    strict["required"].append("field_the_server_never_sends")
    (copy / "result.schema.json").write_text(json.dumps(strict))
    stricter = load_spec(path=copy / "openapi.yaml")
    case = stricter["/v1/sweeps/{id}"]["GET"].Case(path_parameters={"id": service.sweep})
    with pytest.raises(BaseException) as failure:
        case.call_and_validate(base_url=service.url, checks=CHECKS, timeout=60)
    assert "field_the_server_never_sends" in str(failure.value)
    # The untouched spec accepts the same response.
    call(service.url, "GET", "/v1/sweeps/{id}", 200, path_parameters={"id": service.sweep})


# ---- access tokens ------------------------------------------------------------------------

TOKEN = "contract-token-0123456789abcdef"


def _minimal_case_args(path: str, method: str) -> dict:
    args: dict = {}
    names = [p.strip("{}") for p in path.split("/") if p.startswith("{")]
    values = {"id": "sw-1", "covariance": "full", "components": 1}
    if path.startswith("/v1/datasets/"):
        values["id"] = "ds-" + "0" * 64
    if names:
        args["path_parameters"] = {n: values[n] for n in names}
    if method == "POST":
        if path == "/v1/sweeps":
            args.update(body={"dataset": "ds-" + "0" * 64}, media_type="application/json")
        else:
            args.update(body="a,b\n1,2\n", media_type="text/csv")
    return args


def test_with_tokens_every_operation_but_the_open_ones_answers_401(start_server):
    server = start_server("tokens", env={"MIXGAUGE_TOKENS": TOKEN})
    checked = 0
    for path, item in schema.raw_schema["paths"].items():
        for method, operation in item.items():
            if method not in ("get", "post", "delete"):
                continue
            is_open = operation.get("security") == []
            case_args = _minimal_case_args(path, method.upper())
            case = schema[path][method.upper()].Case(**case_args)
            response = case.call_and_validate(base_url=server.base, checks=CHECKS, timeout=60)
            if is_open:
                assert response.status_code != 401, f"{method} {path} should be open"
            else:
                assert response.status_code == 401, f"{method} {path}: {response.status_code}"
                assert error_code(response) == "unauthorised"
            wrong = schema[path][method.upper()].Case(**case_args)
            response = wrong.call_and_validate(base_url=server.base, checks=CHECKS, timeout=60,
                                               headers={"Authorization": "Bearer not-" + TOKEN})
            assert (response.status_code == 401) != is_open, f"{method} {path} with a wrong token"
            checked += 1
    assert checked == 20, checked
    r = call(server.base, "GET", "/v1/datasets", 200, headers={"Authorization": f"Bearer {TOKEN}"})
    assert r.json() == {"items": [], "next": None}
