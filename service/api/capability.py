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
FHIR_VERSION = "4.0.1"  # R4: what the service declares; its answers validate as R4B too
# The fhirVersion MIME parameter's values the service speaks, with the release each names.
FHIR_VERSIONS = {"4.0": "4.0.1", "4.3": "4.3.0"}
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
            "mechanisms of hypoxaemia with the rule set's thresholds. The request body is a "
            "Parameters resource with the Bundle as the `resource` parameter (and `units` as "
            "a valueCode), as FHIR operations take their input, or the Bundle itself; `units` "
            "may also be a URL parameter. application/fhir+ndjson carries one Bundle (or one "
            "such Parameters) per line and is answered line by line, in order. " + CAUTION
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
                "documentation": (
                    "The input Bundle (any type): this parameter of a Parameters body, or the "
                    "whole request body."
                ),
            },
            {
                "name": "units",
                "use": "in",
                "min": 0,
                "max": "1",
                "type": "code",
                "documentation": (
                    "Pressure unit of the result: mm[Hg] (default) or kPa; a valueCode in a "
                    "Parameters body, or the URL parameter units."
                ),
            },
            {
                "name": "return",
                "use": "out",
                "min": 1,
                "max": "1",
                "type": "Bundle",
                "documentation": (
                    "A collection Bundle: GuidanceResponse, Parameters (the verdict and every "
                    "finding), OperationOutcome (how the input was processed, and the clinical "
                    "caution), a DetectedIssue per data-quality problem, derived Observations "
                    "and the mechanism assessment. Returned as the body itself (one out "
                    "parameter of type Bundle, FHIR R4 operations.html)."
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
        # restful-security-service has a code for OAuth (a JWT bearer token checked against
        # the issuer's keys is one) but none for a static API key: that one is named in text.
        services: list[dict[str, Any]] = []
        if "jwt" in auth_methods:
            services.append(
                {
                    "coding": [
                        {
                            "system": "http://terminology.hl7.org/CodeSystem/restful-security-service",
                            "code": "OAuth",
                        }
                    ],
                    "text": "Bearer JWT checked against the issuer's JWK Set",
                }
            )
        if "api-key" in auth_methods:
            services.append({"text": "Bearer static API key (no standard code exists)"})
        rest["security"] = {
            "service": services,
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
        "implementation": {"description": "oxyrule rule service"},  # url: with_installation
        "fhirVersion": FHIR_VERSION,
        "format": FORMATS,
        "rest": [rest],
    }


def with_installation(
    statement: dict[str, Any], base_url: str, fhir_version: str
) -> dict[str, Any]:
    """The CapabilityStatement of this installation: ``implementation.url`` its FHIR base
    (``base_url`` is the service's public URL), ``fhirVersion`` the release asked for."""
    implementation = {**statement["implementation"], "url": base_url.rstrip("/") + "/fhir"}
    return {**statement, "implementation": implementation, "fhirVersion": fhir_version}
