"""Loads api-spec/openapi.yaml for schemathesis.

The spec's relative `$ref`s to `./result.schema.json` and `./model.schema.json` are resolved by
schemathesis itself from the spec's own folder (test_contract_spec checks that a response is
really validated against those files), so nothing is copied or bundled.
"""

from __future__ import annotations

import schemathesis
from schemathesis.checks import not_a_server_error
from schemathesis.config import SchemathesisConfig
from schemathesis.specs.openapi.checks import (
    content_type_conformance,
    response_headers_conformance,
    response_schema_conformance,
    status_code_conformance,
)

from contract_support import SPEC_PATH

# Bodies of these two media types are sent as generated, like their built-in cousins: CSV is
# text, NPY is bytes. Without this, schemathesis would leave cases of these types out.
schemathesis.serializer.alias("application/csv", "text/plain")
schemathesis.serializer.alias("application/x-npy", "application/octet-stream")


def load_spec(config: dict | None = None, path=SPEC_PATH):
    return schemathesis.openapi.from_path(path, config=SchemathesisConfig.from_dict(config or {}))


#: The checks every response meets: no 5xx, a documented status, a documented media type, the
#: documented headers, and a body valid under the documented schema.
CHECKS = [
    not_a_server_error,
    status_code_conformance,
    content_type_conformance,
    response_headers_conformance,
    response_schema_conformance,
]
