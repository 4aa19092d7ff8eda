"""The FHIR conformance resources: the CapabilityStatement and the operation's definition.

Both are plain dicts, built once per app; the tests validate them with the R4B models.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from service import __version__
from service.assess.result import CAUTION
from service.runtime import Runtime

CANONICAL = "https://oxyrule.org/fhir"
OPERATION = "assess-hypoxaemia"
OPERATION_URL = f"{CANONICAL}/OperationDefinition/{OPERATION}"
FHIR_VERSION = "4.3.0"  # R4B: what the result validates against; R4 input is read too
FORMATS = [
    "json",
    "application/fhir+json",
    "application/json",
    "application/fhir+ndjson",
    "application/ndjson",
]


def operation_definition() -> dict[str, Any]:
    """The OperationDefinition of ``$assess-hypoxaemia`` (system level, no state change)."""
    return {
        "resourceType": "OperationDefinition",
        "id": OPERATION,
        "url": OPERATION_URL,
        "version": __version__,
        "name": "AssessHypoxaemia",
        "title": "Assess the likely mechanism of hypoxaemia",
        "status": "active",
        "kind": "operation",
        "publisher": "oxyrule",
        "description": (
            "Reads one patient's recent blood gases, oximetry and oxygen settings (a FHIR "
            "Bundle of Observations), computes the gas-exchange physiology and grades five "
            "mechanisms of hypoxaemia with the rule set's thresholds. The request body is the "
            "Bundle itself; application/fhir+ndjson carries one Bundle per line and is answered "
            "line by line, in order. " + CAUTION
        ),
        "affectsState": False,
        "code": OPERATION,
        "system": True,
        "type": False,
        "instance": False,
        "parameter": [
            {
                "name": "resource",
                "use": "in",
                "min": 1,
                "max": "1",
                "type": "Bundle",
                "documentation": "The input Bundle (any type), sent as the whole request body.",
            },
            {
                "name": "units",
                "use": "in",
                "min": 0,
                "max": "1",
                "type": "code",
                "documentation": "Pressure unit of the result: mm[Hg] (default) or kPa.",
            },
            {
                "name": "return",
                "use": "out",
                "min": 1,
                "max": "1",
                "type": "Bundle",
                "documentation": (
                    "A collection Bundle: GuidanceResponse, Parameters (the verdict), "
                    "OperationOutcome (findings and the clinical caution), derived Observations."
                ),
            },
        ],
    }


def capability_statement(runtime: Runtime, auth_methods: list[str]) -> dict[str, Any]:
    """The CapabilityStatement of this running instance."""
    rest: dict[str, Any] = {
        "mode": "server",
        "documentation": f"Rule set {runtime.ruleset.id}|{runtime.ruleset.version}. {CAUTION}",
        "operation": [
            {
                "name": OPERATION,
                "definition": OPERATION_URL,
                "documentation": "POST [base]/$assess-hypoxaemia with the Bundle as the body.",
            }
        ],
    }
    if auth_methods:
        rest["security"] = {
            "service": [
                {
                    "coding": [
                        {
                            "system": "http://terminology.hl7.org/CodeSystem/restful-security-service",
                            "code": "OAuth",
                        }
                    ]
                }
            ],
            "description": "Bearer token required for the operation: "
            + " or ".join(
                {"api-key": "a static API key", "jwt": "a signed JWT"}[m] for m in auth_methods
            )
            + ". Metadata and health endpoints are open.",
        }
    return {
        "resourceType": "CapabilityStatement",
        "id": "oxyrule",
        "url": f"{CANONICAL}/CapabilityStatement/oxyrule",
        "version": __version__,
        "name": "OxyruleService",
        "title": "oxyrule: mechanism of hypoxaemia",
        "status": "active",
        "experimental": False,
        "date": datetime.now(UTC).date().isoformat(),
        "publisher": "oxyrule",
        "description": "Stateless decision support for blood-gas data. " + CAUTION,
        "kind": "instance",
        "software": {"name": "oxyrule", "version": __version__},
        "implementation": {"description": "oxyrule rule service"},
        "fhirVersion": FHIR_VERSION,
        "format": FORMATS,
        "rest": [rest],
    }
