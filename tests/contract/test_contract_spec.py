"""The spec itself: valid OpenAPI 3.1, every `$ref` resolves, the shared JSON Schemas are valid
2020-12 schemas, and the routes it describes are exactly the routes the Rust router serves.

Sources of the checks: the OpenAPI 3.1 meta-schema as schemathesis ships it
(`schema.validate()`), openapi-spec-validator's 3.1 validator, and jsonschema's Draft 2020-12
meta-schema check.
"""

from __future__ import annotations

import json
import re
from urllib.parse import urldefrag

import jsonschema
import yaml
from openapi_spec_validator import validate as validate_openapi

from contract_support import SERVICE_SRC, SPEC_DIR, SPEC_PATH
from spec_loading import load_spec

METHODS = ("get", "post", "put", "delete", "patch", "head", "options", "trace")


def spec() -> dict:
    return yaml.safe_load(SPEC_PATH.read_text())


def test_the_spec_is_openapi_3_1():
    document = spec()
    assert document["openapi"].startswith("3.1."), document["openapi"]
    load_spec().validate()  # schemathesis: the OpenAPI 3.1 meta-schema
    validate_openapi(document, base_uri=SPEC_PATH.as_uri())  # openapi-spec-validator


def test_the_shared_json_schemas_are_valid_2020_12_schemas():
    for name in ("result.schema.json", "model.schema.json"):
        document = json.loads((SPEC_DIR / name).read_text())
        assert document["$schema"] == "https://json-schema.org/draft/2020-12/schema", name
        jsonschema.Draft202012Validator.check_schema(document)


def _refs(node, found):
    if isinstance(node, dict):
        if isinstance(node.get("$ref"), str):
            found.append(node["$ref"])
        for v in node.values():
            _refs(v, found)
    elif isinstance(node, list):
        for v in node:
            _refs(v, found)
    return found


def _pointer(document, fragment: str):
    node = document
    for part in [p for p in fragment.lstrip("/").split("/") if p]:
        part = part.replace("~1", "/").replace("~0", "~")
        node = node[int(part)] if isinstance(node, list) else node[part]
    return node


def test_every_ref_resolves_and_the_shared_schemas_are_referenced_not_copied():
    document = spec()
    refs = _refs(document, [])
    files = set()
    for ref in refs:
        target, fragment = urldefrag(ref)
        if target:
            assert not re.match(r"^[a-z]+:", target), f"{ref}: refer to files beside the spec, not to a URL"
            path = (SPEC_DIR / target).resolve()
            assert path.is_file(), f"{ref}: no file {path}"
            files.add(path.name)
            _pointer(json.loads(path.read_text()), fragment)
        else:
            _pointer(document, fragment)
    # Referenced, so the result and model documents are described by one schema each.
    assert {"result.schema.json", "model.schema.json"} <= files, files
    text = SPEC_PATH.read_text()
    for marker in ("mixgauge.sweep/1", "mixgauge.model/1"):
        assert marker not in text, f"the spec holds a copy of a shared schema ({marker})"


# ---- the router against the spec ------------------------------------------------------------


def _router_routes() -> set[tuple[str, str]]:
    """(METHOD, path) of every `.route("…", …)` call in the service's Rust source."""
    routes = set()
    sources = sorted(SERVICE_SRC.rglob("*.rs"))
    assert sources, f"no Rust source under {SERVICE_SRC}"
    for source in sources:
        text = source.read_text()
        assert ".nest(" not in text and ".nest_service(" not in text, (
            f"{source}: a nested router; teach this test to prefix its routes"
        )
        for match in re.finditer(r"\.route\(\s*\"([^\"]+)\"\s*,", text):
            path = match.group(1)
            # The handler expression runs to the `)` that closes `.route(`.
            depth, i = 1, match.end()
            while depth:
                depth += {"(": 1, ")": -1}.get(text[i], 0)
                i += 1
            handlers = text[match.end(): i - 1]
            methods = re.findall(r"(?:^|[\s.])(get|post|put|delete|patch|head|options|trace)\(", handlers)
            assert methods, f"{source}: no method in the route {path}: {handlers!r}"
            routes.update((m.upper(), path) for m in methods)
    return routes


def _spec_routes() -> set[tuple[str, str]]:
    return {
        (method.upper(), path)
        for path, item in spec()["paths"].items()
        for method in item
        if method in METHODS
    }


def test_the_router_parser_reads_the_known_routes():
    """Guards the parser above: were it to find nothing, the drift test would prove nothing."""
    routes = _router_routes()
    for expected in [("GET", "/healthz"), ("POST", "/v1/datasets"), ("GET", "/v1/datasets"),
                     ("DELETE", "/v1/datasets/{id}"), ("GET", "/ui/app.js")]:
        assert expected in routes, routes
    assert len(routes) >= 18, routes


def test_every_route_is_in_the_spec_and_every_spec_operation_is_a_route():
    router, described = _router_routes(), _spec_routes()
    assert not router - described, f"routes the spec does not describe: {sorted(router - described)}"
    assert not described - router, f"operations in the spec the router does not serve: {sorted(described - router)}"


def test_open_routes_are_the_health_checks_and_the_page():
    """`security: []` exactly on the health checks and the page; test_contract_states checks
    the server agrees, with tokens configured."""
    document = spec()
    open_ops = {
        (m.upper(), p) for p, item in document["paths"].items() for m, op in item.items()
        if m in METHODS and op.get("security") == []
    }
    expected = {("GET", p) for p in ["/healthz", "/readyz", "/", "/ui/app.js", "/ui/style.css", "/favicon.ico"]}
    assert open_ops == expected, sorted(open_ops ^ expected)
