"""``GET /fhir/metadata`` and ``GET /fhir/OperationDefinition/assess-hypoxaemia``."""

from __future__ import annotations

import orjson
from fastapi import APIRouter, Request, Response

from service.api.deps import FormatDep, ServiceDep
from service.api.media import BodyKind, answer_type

router = APIRouter(prefix="/fhir", tags=["conformance"])


def _fhir(request: Request, resource: object, format_: str | None) -> Response:
    media_type = answer_type(BodyKind.BUNDLE, format_, request.headers.get("accept"))
    return Response(orjson.dumps(resource), media_type=media_type)


@router.get("/metadata")
async def capability_statement(
    request: Request, service: ServiceDep, format_: FormatDep = None
) -> Response:
    """The CapabilityStatement (FHIR 4.3.0): formats, security and the operation offered."""
    return _fhir(request, service.conformance["CapabilityStatement"], format_)


@router.get("/OperationDefinition/assess-hypoxaemia")
async def operation_definition(
    request: Request, service: ServiceDep, format_: FormatDep = None
) -> Response:
    """The OperationDefinition of `$assess-hypoxaemia`: its parameters and what it returns."""
    return _fhir(request, service.conformance["OperationDefinition"], format_)
