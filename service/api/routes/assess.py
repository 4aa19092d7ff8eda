"""``POST /fhir/$assess-hypoxaemia``: a Bundle in, the result Bundle out (or NDJSON of each)."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request, Response

from service.api.answers import answer_bundle
from service.api.body import Line, Pace, bounded_body, ndjson_lines
from service.api.deps import (
    FORMAT_DOC,
    UNITS_DOC,
    caller_of,
    pressure_unit,
    record_of,
    service_of,
)
from service.api.errors import FHIR_JSON, ApiError, outcome
from service.api.media import BodyKind, body_kind, negotiate
from service.api.middleware import ASSESS_PATH
from service.api.ndjson import NdjsonAnswer
from service.api.sending import PacedResponse
from service.api.state import RequestRecord, ServiceState
from service.api.tally import Tally
from service.assess.presentation import PressureUnit

router = APIRouter(tags=["assessment"])

NO_STORE = {"Cache-Control": "no-store"}


def _outcome_doc(description: str) -> dict[str, Any]:
    return {"description": description, "content": {"application/fhir+json": {}}}


OPENAPI: dict[str, Any] = {
    "parameters": [
        {
            "name": "units",
            "in": "query",
            "required": False,
            "description": UNITS_DOC,
            "schema": {"type": "string", "enum": ["mm[Hg]", "kPa"]},
        },
        {
            "name": "_format",
            "in": "query",
            "required": False,
            "description": FORMAT_DOC,
            "schema": {"type": "string"},
        },
    ],
    "security": [{}, {"bearer": []}],
    "requestBody": {
        "required": True,
        "description": "One FHIR R4 Bundle, or a Parameters resource holding it (`resource`, "
        "and `units` as a valueCode), or NDJSON with one of those per line.",
        "content": {
            "application/fhir+json": {"schema": {"type": "object"}},
            "application/json": {"schema": {"type": "object"}},
            "application/fhir+ndjson": {"schema": {"type": "string"}},
            "application/ndjson": {"schema": {"type": "string"}},
        },
    },
}
RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {
        "description": "The result Bundle (NDJSON: one result or OperationOutcome per line)",
        "content": {"application/fhir+json": {}, "application/fhir+ndjson": {}},
    },
    400: _outcome_doc("Not JSON, not a Bundle, or a bad parameter (OperationOutcome)"),
    401: _outcome_doc("Authentication required or failed (OperationOutcome)"),
    406: _outcome_doc("No acceptable answer format (OperationOutcome)"),
    408: _outcome_doc("The body did not arrive within OXYRULE_BODY_TIMEOUT_S (OperationOutcome)"),
    413: _outcome_doc("Body over the size limit (OperationOutcome)"),
    415: _outcome_doc("Unsupported Content-Type (OperationOutcome)"),
    422: _outcome_doc("A Bundle that cannot be assessed, each problem located (OperationOutcome)"),
    429: _outcome_doc("Too many assessments in progress; retry (OperationOutcome)"),
}


def _count(service: ServiceState, result: Tally) -> None:
    if result.pattern is not None:
        service.metrics.verdict(result.pattern, result.findings)
    elif result.rejected_code is not None:
        service.metrics.rejection(result.rejected_code)


@router.post(ASSESS_PATH, responses=RESPONSES, openapi_extra=OPENAPI)
async def assess_hypoxaemia(request: Request) -> Response:
    """Assess the likely mechanism of hypoxaemia of one Bundle (or of each NDJSON line).

    Send the Bundle as the body (`application/fhir+json`), or a Parameters resource holding it
    (`resource`, and `units` as a valueCode). The answer is the result Bundle: GuidanceResponse,
    Parameters with the verdict and every finding, OperationOutcome with how the input was
    processed and the clinical caution, a DetectedIssue per data-quality problem, derived
    Observations. With `application/fhir+ndjson` each line is one Bundle and the answer streams
    one line per input line, in order; a line that cannot be assessed is answered by an
    OperationOutcome naming it. Decision support for qualified clinicians, not a diagnosis.
    """
    service, record = service_of(request), record_of(request)
    caller_of(request)  # 401/403 before anything is read
    units = pressure_unit(request.query_params.get("units"))
    kind = body_kind(request.headers.get("content-type"))
    media_type = negotiate(
        kind, request.query_params.get("_format"), request.headers.get("accept")
    ).content_type
    if kind is BodyKind.NDJSON:
        return await _ndjson(request, service, record, units, media_type)
    server = service.server
    runtime = service.runtime  # one rule set for the whole request
    async with bounded_body(
        request, server.max_body_bytes, server.body_timeout_s, service.budget
    ) as raw:
        record.bytes_in = len(raw)
        answered = await service.work.run_sized(
            len(raw), answer_bundle, runtime, raw, units, service.read_limits
        )
    record.pattern = answered.tally.pattern
    _count(service, answered.tally)
    ok = answered.status == 200
    return PacedResponse(
        answered.body,
        answered.status,
        media_type=media_type if ok else FHIR_JSON,
        headers=NO_STORE if ok else None,
        record=record,
        timeout_s=server.body_timeout_s,
    )


async def _ndjson(
    request: Request,
    service: ServiceState,
    record: RequestRecord,
    units: PressureUnit | None,
    media_type: str,
) -> Response:
    server = service.server
    pace = Pace(server.body_timeout_s, server.body_min_bytes_per_s)
    lines = ndjson_lines(request.stream(), server.max_body_bytes, pace)
    first: Line | None = await anext(lines, None)
    if first is None:
        raise ApiError(400, outcome("required", "the NDJSON body has no lines"))
    record.lines, record.rejected = 0, 0

    def on_line(result: Tally) -> None:
        record.lines = (record.lines or 0) + 1
        if result.pattern is None:
            record.rejected = (record.rejected or 0) + 1
        _count(service, result)

    return NdjsonAnswer(
        first,
        lines,
        service=service,
        record=record,
        pace=pace,
        unit=units,
        media_type=media_type,
        on_line=on_line,
        headers=NO_STORE,
    )
