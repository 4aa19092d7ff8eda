"""``GET /fhir/metadata``, ``GET /fhir/$versions`` and ``GET /fhir/OperationDefinition/...``.

The service declares FHIR R4 (4.0.1); its answers also validate as R4B (4.3.0), so a client
that asks for R4B with the ``fhirVersion`` parameter (Accept or ``_format``) gets the
CapabilityStatement that says 4.3.0. ``$versions`` (FHIR R4 http.html, "Version") names both,
R4 the default. ``HEAD`` is answered wherever ``GET`` is (RFC 9110).
"""

from __future__ import annotations

from typing import Any

import orjson
from fastapi import APIRouter, Request, Response

from service.api.capability import FHIR_VERSIONS, with_installation
from service.api.deps import FormatDep, ServiceDep
from service.api.media import DECLARED_VERSION, Answer, BodyKind, negotiate

router = APIRouter(prefix="/fhir", tags=["conformance"])


def _fhir(resource: object, answer: Answer) -> Response:
    return Response(orjson.dumps(resource), media_type=answer.content_type)


def _answer(request: Request, format_: str | None) -> Answer:
    return negotiate(BodyKind.BUNDLE, format_, request.headers.get("accept"))


@router.get("/metadata")
async def capability_statement(
    request: Request, service: ServiceDep, format_: FormatDep = None
) -> Response:
    """The CapabilityStatement (FHIR R4 4.0.1; 4.3.0 when R4B is asked for with the
    `fhirVersion` parameter): formats, security and the operation offered."""
    answer = _answer(request, format_)
    statement: dict[str, Any] = with_installation(
        service.conformance["CapabilityStatement"],
        service.server.cds_base_url or str(request.base_url),
        FHIR_VERSIONS[answer.fhir_version or DECLARED_VERSION],
    )
    return _fhir(statement, answer)


@router.get("/$versions")
async def versions(request: Request, format_: FormatDep = None) -> Response:
    """The FHIR versions the service speaks (R4 and R4B) and its default (R4)."""
    answer = _answer(request, format_)
    parameters = {
        "resourceType": "Parameters",
        "parameter": [
            *({"name": "version", "valueCode": v} for v in FHIR_VERSIONS),
            {"name": "default", "valueCode": DECLARED_VERSION},
        ],
    }
    return _fhir(parameters, answer)


@router.get("/OperationDefinition/assess-hypoxaemia")
async def operation_definition(
    request: Request, service: ServiceDep, format_: FormatDep = None
) -> Response:
    """The OperationDefinition of `$assess-hypoxaemia`: its parameters and what it returns."""
    return _fhir(service.conformance["OperationDefinition"], _answer(request, format_))


# HEAD: the same handlers, left out of the OpenAPI document (one operation per GET there).
for _path, _handler in (
    ("/metadata", capability_statement),
    ("/$versions", versions),
    ("/OperationDefinition/assess-hypoxaemia", operation_definition),
):
    router.add_api_route(_path, _handler, methods=["HEAD"], include_in_schema=False)
