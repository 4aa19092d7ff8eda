"""API fuzzing against the service's own OpenAPI document (schemathesis, in process).

schemathesis reads ``/openapi.json`` from the app and generates requests for every documented
operation, valid ones (from the schemas and the examples) and invalid ones (wrong types,
missing bodies, values outside the enums), sent through the ASGI transport: no network. Each
answer must not be a 5xx, must have a documented status code and media type, and its body must
fit the documented schema. Bounded: ``MAX_EXAMPLES`` per operation and mode, well under a
minute in all.

Documented exclusions: none of the checks is disabled; schemathesis' ``ignored_auth`` and
stateful checks are not run (authentication is off here and tested route by route in
``test_auth.py``, the CDS Hooks JWT in ``tests/cds/test_trust.py``; the service keeps no state
between requests). The CDS Hooks routes accept unsigned calls here
(``OXYRULE_CDS_ALLOW_UNSIGNED``), so the fuzzer reaches their request reading, not only the
401 of a missing JWT.
"""

from __future__ import annotations

import warnings
from typing import Any

import pytest
from hypothesis import HealthCheck, settings

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    import schemathesis
    from schemathesis.checks import not_a_server_error
    from schemathesis.specs.openapi.checks import (
        content_type_conformance,
        response_schema_conformance,
        status_code_conformance,
    )

from service.api import create_app
from service.config import ServerSettings, Settings
from service.runtime import Runtime

MAX_EXAMPLES = 100


@schemathesis.serializer(
    "application/fhir+ndjson",
    "application/ndjson",
    "x-application/hl7-v2+er7",
    "application/hl7-v2",
)
def as_text(_context: object, value: object) -> bytes:
    """NDJSON and HL7 v2 bodies are documented as strings: sent as their UTF-8 bytes."""
    return value.encode() if isinstance(value, str) else str(value).encode()


CHECKS = [
    not_a_server_error,
    status_code_conformance,
    content_type_conformance,
    response_schema_conformance,
]
APP = create_app(Settings(), ServerSettings(cds_allow_unsigned=True), runtime=Runtime.load())
SCHEMA = schemathesis.openapi.from_asgi("/openapi.json", APP)
CASES: dict[tuple[str, int], int] = {}  # (operation, status): cases, for the record


@pytest.mark.filterwarnings("ignore::DeprecationWarning")
@SCHEMA.parametrize()
@settings(
    max_examples=MAX_EXAMPLES,
    deadline=None,
    suppress_health_check=list(HealthCheck),
    database=None,
)
def test_every_documented_operation_answers_as_documented(case: schemathesis.Case[Any]) -> None:
    # schemathesis' ASGI client runs the app's lifespan around each call, and the end of the
    # lifespan marks the app draining (/readyz 503, as at shutdown): start each call ready.
    APP.state.service.draining = False
    response = case.call_and_validate(checks=CHECKS)
    key = (case.operation.label, response.status_code)
    CASES[key] = CASES.get(key, 0) + 1
