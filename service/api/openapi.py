"""The OpenAPI document, made to say what the service really answers.

FastAPI documents each route from its signature: JSON answers, a 422 ``HTTPValidationError``
for bad parameters, and nothing for what the middleware adds. This service answers otherwise,
so ``complete`` rewrites the generated document:

* every error is an OperationOutcome (``application/fhir+json``), a bad parameter a 400;
* every route but the public ones can answer 401/403 (authentication, when configured);
* the assessing routes can answer 429 (too many in flight), 408 (body too slow) and 413;
* each answer names its real media types (FHIR JSON and its ``_format`` alternatives, NDJSON,
  HL7 v2 ER7, Prometheus text) and a small schema of its body;
* ``POST /hl7v2``, which reads its body itself, gets its request body and parameters;
* the CDS Hooks routes get their bodies, answers (discovery, cards, 412) and their own
  security scheme: the EHR's signed JWT, not the service's API keys.

``tests/api/test_openapi_fuzz.py`` holds the service to this document with schemathesis.
"""

from __future__ import annotations

import copy
from typing import Any

from service.api.media import FHIR_JSON, FHIR_NDJSON, JSON, NDJSON
from service.api.middleware import ASSESS_PATH, CDS_PATH, LIMITED, PUBLIC, V2_PATH, is_cds
from service.api.routes.health import PROMETHEUS_TEXT
from service.api.routes.hl7v2 import V2_MEDIA_TYPES
from service.cds.services import SERVICES
from service.fhir.codes import BUNDLE_TYPES

Schema = dict[str, Any]


def _resource(resource_type: str) -> Schema:
    return {
        "type": "object",
        "required": ["resourceType"],
        "properties": {"resourceType": {"const": resource_type}},
    }


OUTCOME: Schema = {
    "type": "object",
    "required": ["resourceType", "issue"],
    "properties": {
        "resourceType": {"const": "OperationOutcome"},
        "issue": {
            "type": "array",
            "minItems": 1,
            "items": {"type": "object", "required": ["severity", "code"]},
        },
    },
}
TEXT: Schema = {"type": "string"}


def _outcome(description: str) -> Schema:
    return {"description": description, "content": {FHIR_JSON: {"schema": OUTCOME}}}


def _fhir(description: str, body: Schema) -> Schema:
    """A FHIR resource in FHIR JSON or plain JSON (``_format`` or ``Accept`` picks)."""
    return {"description": description, "content": {FHIR_JSON: {"schema": body}, JSON: {}}}


# A small invented Bundle: the example a client (or schemathesis) may send.
EXAMPLE_BUNDLE: Schema = {
    "resourceType": "Bundle",
    "type": "collection",
    "entry": [
        {
            "resource": {
                "resourceType": "Observation",
                "status": "final",
                "code": {"coding": [{"system": "http://loinc.org", "code": code}]},
                "effectiveDateTime": "2026-11-20T10:00:00Z",
                "valueQuantity": {
                    "value": value,
                    "unit": unit,
                    "system": "http://unitsofmeasure.org",
                    "code": unit,
                },
            }
        }
        for code, value, unit in (
            ("2703-7", 58, "mm[Hg]"),
            ("2019-8", 41, "mm[Hg]"),
            ("3150-0", 21, "%"),
        )
    ],
}
EXAMPLE_V2 = (
    "MSH|^~\\&|INVENTED-LAB|INVENTED-SITE|OXYRULE|INVENTED-SITE|20261120074500+0000||"
    "ORU^R01^ORU_R01|EXAMPLE-0001|T|2.5.1\r"
    "PID|1||EXAMPLE-0001^^^INVENTED^MR||INVENTED^PATIENT||19580314|F\r"
    "OBR|1|ORD-1|LAB-1|24336-0^Gas panel - Arterial blood^LN|||20261120074000+0000\r"
    "OBX|1|NM|2703-7^^LN||58|mm[Hg]^mmHg^UCUM|||||F|||20261120074000+0000\r"
    "OBX|2|NM|2019-8^^LN||41|mm[Hg]^mmHg^UCUM|||||F|||20261120074000+0000\r"
    "OBX|3|NM|3150-0^^LN||21|%^percent^UCUM|||||F|||20261120074000+0000\r"
)

V2_ANSWER: Schema = {media: {"schema": TEXT} for media in V2_MEDIA_TYPES} | {
    FHIR_JSON: {"schema": {"type": "object", "required": ["resourceType"]}}
}

# Per route and method: the answers it documents (replacing FastAPI's), beyond the shared ones.
ANSWERS: dict[tuple[str, str], dict[str, Schema]] = {
    ("get", "/healthz"): {
        "200": {
            "description": "The process is up",
            "content": {JSON: {"schema": {"type": "object", "required": ["status"]}}},
        },
    },
    ("get", "/readyz"): {
        "200": {
            "description": "A rule set lint accepts is loaded: its id|version and content hash",
            "content": {
                JSON: {
                    "schema": {
                        "type": "object",
                        "required": ["status", "ruleset", "ruleset_hash"],
                    }
                }
            },
        },
        "503": _outcome("Shutting down (OperationOutcome)"),
    },
    ("get", "/metrics"): {
        "200": {
            "description": "Prometheus text exposition format 0.0.4 (counts only)",
            "content": {PROMETHEUS_TEXT.split(";")[0]: {"schema": TEXT}},
        },
    },
    ("get", "/fhir/metadata"): {
        "200": _fhir("The CapabilityStatement", _resource("CapabilityStatement")),
        "400": _outcome("A bad parameter (OperationOutcome)"),
        "406": _outcome("No acceptable answer format (OperationOutcome)"),
    },
    ("get", "/fhir/$versions"): {
        "200": _fhir("The FHIR versions spoken and the default", _resource("Parameters")),
        "400": _outcome("A bad parameter (OperationOutcome)"),
        "406": _outcome("No acceptable answer format (OperationOutcome)"),
    },
    ("get", "/fhir/OperationDefinition/assess-hypoxaemia"): {
        "200": _fhir("The OperationDefinition", _resource("OperationDefinition")),
        "400": _outcome("A bad parameter (OperationOutcome)"),
        "406": _outcome("No acceptable answer format (OperationOutcome)"),
    },
    ("post", ASSESS_PATH): {
        "200": {
            "description": "The result Bundle; for NDJSON, one result or OperationOutcome a line",
            "content": {
                FHIR_JSON: {"schema": _resource("Bundle")},
                JSON: {"schema": _resource("Bundle")},
                FHIR_NDJSON: {"schema": TEXT},
                NDJSON: {"schema": TEXT},
            },
        },
    },
    ("post", V2_PATH): {
        "200": {
            "description": "ACK with MSA-1 AA (or the FHIR result / ORU^R01 result on request); "
            "in enhanced mode the commit ACK CA when only that is asked for",
            "content": V2_ANSWER,
        },
        "204": {"description": "Enhanced mode (MSH-15/MSH-16) asked for no acknowledgment here"},
        "400": {
            "description": "ACK with MSA-1 AR (or an OperationOutcome): unsupported type, "
            "version or processing id, not a message; or a bad parameter",
            "content": V2_ANSWER,
        },
        "415": _outcome("Not an HL7 v2 media type (OperationOutcome)"),
        "422": {
            "description": "ACK with MSA-1 AE and ERR segments naming segment, field and reason "
            "(or an OperationOutcome)",
            "content": V2_ANSWER,
        },
    },
}

V2_REQUEST: Schema = {
    "parameters": [
        {
            "name": "reply",
            "in": "query",
            "required": False,
            "description": "result: answer with an ORU^R01 carrying the result instead of an ACK",
            "schema": {"type": "string"},
        },
        {
            "name": "units",
            "in": "query",
            "required": False,
            "description": "pressure unit of the result: mm[Hg] (default) or kPa",
            "schema": {"type": "string", "enum": ["mm[Hg]", "kPa"]},
        },
    ],
    "requestBody": {
        "required": True,
        "description": "One HL7 v2 ORU^R01 message, ER7 encoded (segments separated by CR)",
        "content": {media: {"schema": TEXT, "example": EXAMPLE_V2} for media in V2_MEDIA_TYPES},
    },
}


# CDS Hooks 2.0: the discovery document, the cards answer, the request and feedback bodies.
CDS_SERVICE_PATH = CDS_PATH + "/{service_id}"
CDS_FEEDBACK_PATH = CDS_SERVICE_PATH + "/feedback"
CARD: Schema = {
    "type": "object",
    "required": ["summary", "indicator", "source"],
    "properties": {
        "uuid": {"type": "string"},
        "summary": {"type": "string", "minLength": 1, "maxLength": 139},
        "detail": {"type": "string"},
        "indicator": {"enum": ["info", "warning", "critical"]},
        "source": {
            "type": "object",
            "required": ["label"],
            "properties": {"label": {"type": "string", "minLength": 1}},
        },
        "suggestions": {"type": "array", "items": {"type": "object", "required": ["label"]}},
        "selectionBehavior": {"enum": ["at-most-one", "any"]},
        "overrideReasons": {
            "type": "array",
            "items": {"type": "object", "required": ["code", "system", "display"]},
        },
        "links": {
            "type": "array",
            "items": {"type": "object", "required": ["label", "url", "type"]},
        },
    },
}
CARDS: Schema = {
    "type": "object",
    "required": ["cards"],
    "properties": {"cards": {"type": "array", "items": CARD}},
}
DISCOVERY: Schema = {
    "type": "object",
    "required": ["services"],
    "properties": {
        "services": {
            "type": "array",
            "items": {"type": "object", "required": ["hook", "description", "id"]},
        }
    },
}
EXAMPLE_HOOK: Schema = {
    "hook": "patient-view",
    "hookInstance": "0b9e5f0c-3c1e-4a52-9d0e-6a3f1c2b7d41",
    "context": {"userId": "Practitioner/example", "patientId": "example"},
    "prefetch": {
        "patient": {"resourceType": "Patient", "id": "example", "birthDate": "1958-03-14"},
        "bloodGases": {"resourceType": "Bundle", "type": "searchset", "entry": []},
        "oximetry": {"resourceType": "Bundle", "type": "searchset", "entry": []},
        "oxygenSettings": {"resourceType": "Bundle", "type": "searchset", "entry": []},
    },
}
EXAMPLE_FEEDBACK: Schema = {
    "feedback": [
        {
            "card": "9368d37b-283f-44a0-93ea-547cebab93ed",
            "outcome": "overridden",
            "overrideReason": {
                "reason": {
                    "system": "https://oxyrule.org/fhir/CodeSystem/cds-override-reason",
                    "code": "already-addressed",
                }
            },
            "outcomeTimestamp": "2026-11-21T15:02:00Z",
        }
    ]
}
CDS_SECURITY: list[dict[str, list[str]]] = [{}, {"cdsClientJwt": []}]
CDS_ANSWERS: dict[tuple[str, str], dict[str, Schema]] = {
    ("get", CDS_PATH): {
        "200": {"description": "The services offered", "content": {JSON: {"schema": DISCOVERY}}},
    },
    ("post", CDS_SERVICE_PATH): {
        "200": {
            "description": "The cards (an empty list when there is nothing to add)",
            "content": {JSON: {"schema": CARDS}},
        },
        "400": _outcome("Not JSON, or a request that is not a valid hook call (OperationOutcome)"),
        "404": _outcome("No service with this id (OperationOutcome)"),
        "412": _outcome(
            "Required data neither prefetched nor readable from fhirServer (OperationOutcome)"
        ),
        "415": _outcome("Not application/json (OperationOutcome)"),
        "422": _outcome("Data that cannot be read, or about another patient (OperationOutcome)"),
    },
    ("post", CDS_FEEDBACK_PATH): {
        "200": {"description": "Feedback received (no body)"},
        "400": _outcome("Not JSON, or not a feedback body (OperationOutcome)"),
        "404": _outcome("No service with this id (OperationOutcome)"),
        "415": _outcome("Not application/json (OperationOutcome)"),
    },
}


def _cds(operation: Schema, method: str, path: str) -> None:
    """A CDS Hooks operation: its answers, body, service ids and the EHR's JWT."""
    responses = operation["responses"]
    responses.update(copy.deepcopy(CDS_ANSWERS.get((method, path), {})))
    responses.setdefault(
        "401", _outcome("The EHR's signed JWT is missing or not valid (OperationOutcome)")
    )
    operation["security"] = copy.deepcopy(CDS_SECURITY)
    for parameter in operation.get("parameters", ()):
        if parameter.get("name") == "service_id":
            parameter["schema"] = {"type": "string", "enum": list(SERVICES)}
    if method == "post":
        example = EXAMPLE_FEEDBACK if path == CDS_FEEDBACK_PATH else EXAMPLE_HOOK
        operation["requestBody"] = {
            "required": True,
            "content": {JSON: {"schema": {"type": "object"}, "example": copy.deepcopy(example)}},
        }
        responses.setdefault("408", _outcome("The body did not arrive in time (OperationOutcome)"))
        responses.setdefault("413", _outcome("Body over the size limit (OperationOutcome)"))
    if path == CDS_SERVICE_PATH:
        responses.setdefault("429", _outcome("Too many assessments in progress (OperationOutcome)"))


def _body_limits(operation: Schema) -> None:
    responses = operation["responses"]
    responses.setdefault("408", _outcome("The body did not arrive in time (OperationOutcome)"))
    responses.setdefault("413", _outcome("Body over the size limit (OperationOutcome)"))
    responses.setdefault("429", _outcome("Too many assessments in progress (OperationOutcome)"))


# What ``_format`` may name, per route: what the service takes, so that a request valid by the
# document is never refused (an empty ``_format`` is refused, and so is not offered).
FORMATS: dict[str, list[str]] = {
    ASSESS_PATH: ["json", FHIR_JSON, JSON, "ndjson", FHIR_NDJSON, NDJSON],
    "/fhir/metadata": ["json", FHIR_JSON, JSON],
    "/fhir/$versions": ["json", FHIR_JSON, JSON],
    "/fhir/OperationDefinition/assess-hypoxaemia": ["json", FHIR_JSON, JSON],
}

# The request body of the operation: a Bundle, with the two members the service requires.
BUNDLE_REQUEST: Schema = {
    "type": "object",
    "required": ["resourceType", "type"],
    "properties": {
        "resourceType": {"const": "Bundle"},
        "type": {"enum": sorted(BUNDLE_TYPES)},
        "entry": {"type": "array", "items": {"type": "object"}},
    },
}


def _formats(path: str, operation: Schema) -> None:
    for parameter in operation.get("parameters", []):
        if parameter.get("name") == "_format" and path in FORMATS:
            parameter["schema"] = {"type": "string", "enum": FORMATS[path]}


def complete(generated: Schema) -> Schema:
    """The document FastAPI generated, corrected as the module docstring says."""
    schema = copy.deepcopy(generated)
    for path, operations in schema.get("paths", {}).items():
        for method, operation in operations.items():
            _formats(path, operation)
            responses = operation.setdefault("responses", {})
            if "HTTPValidationError" in str(responses.get("422")):
                del responses["422"]  # FastAPI's validation error: this service answers 400
            if is_cds(path):
                _cds(operation, method, path)
                continue
            responses.update(copy.deepcopy(ANSWERS.get((method, path), {})))
            if (method, path) == ("post", V2_PATH):
                operation.update(copy.deepcopy(V2_REQUEST))
            if path in LIMITED:
                _body_limits(operation)
            if (method, path) == ("post", ASSESS_PATH):
                for media in (FHIR_JSON, JSON):
                    content = operation["requestBody"]["content"][media]
                    content["schema"] = copy.deepcopy(BUNDLE_REQUEST)
                    content["example"] = EXAMPLE_BUNDLE
            if path not in PUBLIC:
                operation["security"] = [{}, {"bearer": []}]
                responses.setdefault("401", _outcome("Authentication required or failed"))
                responses.setdefault("403", _outcome("The token lacks the required scope"))
    components = schema.setdefault("components", {})
    for name in ("HTTPValidationError", "ValidationError"):
        components.get("schemas", {}).pop(name, None)
    if not components.get("schemas"):
        components.pop("schemas", None)
    return schema
