"""``POST /hl7v2``: an HL7 v2 ORU^R01 (ER7 text) in, an ACK out — or the FHIR result Bundle
(``Accept: application/fhir+json``), or an ORU^R01 carrying the result (``?reply=result``)."""

from __future__ import annotations

from fastapi import APIRouter, Request, Response

from service.api.answers import answer_v2
from service.api.body import bounded_body
from service.api.deps import caller_of, pressure_unit, record_of, service_of
from service.api.errors import ApiError, outcome
from service.api.sending import PacedResponse
from service.hl7v2.handle import Reply

router = APIRouter(tags=["hl7v2"])

V2_MEDIA_TYPES = ("x-application/hl7-v2+er7", "application/hl7-v2", "text/plain")
NO_STORE = {"Cache-Control": "no-store"}

RESPONSES: dict[int | str, dict[str, object]] = {
    200: {
        "description": "ACK with MSA-1 AA (or the FHIR result / ORU^R01 result on request); "
        "in enhanced mode the commit ACK CA when only that is asked for"
    },
    204: {"description": "Enhanced mode (MSH-15/MSH-16) asked for no acknowledgment here"},
    400: {"description": "ACK with MSA-1 AR: unsupported type, version or processing id"},
    401: {"description": "Authentication required or failed (OperationOutcome)"},
    413: {"description": "Body over the size limit (OperationOutcome)"},
    415: {"description": "Not an HL7 v2 media type (OperationOutcome)"},
    422: {"description": "ACK with MSA-1 AE and ERR segments naming segment, field and reason"},
}


def _media_type(content_type: str | None) -> str:
    base = (content_type or "").split(";", 1)[0].strip().lower()
    if base not in V2_MEDIA_TYPES:
        raise ApiError(
            415,
            outcome(
                "not-supported",
                f"send the message as one of {', '.join(V2_MEDIA_TYPES)}",
                "http.Content-Type",
            ),
        )
    return base


def _reply(request: Request) -> Reply:
    if request.query_params.get("reply") == "result":
        return "result"
    accept = request.headers.get("accept", "")
    return "fhir" if "application/fhir+json" in accept else "ack"


@router.post("/hl7v2", responses=RESPONSES)
async def assess_v2(request: Request) -> Response:
    """Assess an HL7 v2 ORU^R01 result message and acknowledge it.

    AA only once the message was fully assessed; AE (with ERR segments naming segment, field
    and reason) when it parsed but could not be assessed; AR for an unsupported message type,
    version or processing id. MSA-2 echoes MSH-10. The reply uses the segments and fields of
    the message's version. In enhanced mode (MSH-15/MSH-16: AL, NE, ER, SU) the application
    ACK when asked for, else the commit ACK (CA, CR) when asked for, else no body (204).
    Decision support for qualified clinicians, not a diagnosis.
    """
    service, record = service_of(request), record_of(request)
    caller_of(request)
    base = _media_type(request.headers.get("content-type"))
    units = pressure_unit(request.query_params.get("units"))
    server, reply = service.server, _reply(request)
    async with bounded_body(
        request, server.max_body_bytes, server.body_timeout_s, service.budget
    ) as raw:
        record.bytes_in = len(raw)
        answer = await service.work.run_heavy(
            len(raw), answer_v2, service.runtime, raw, reply, units, service.v2_limits
        )
    service.metrics.v2_message("http", answer.ack_code)
    media_type = answer.media_type
    if media_type.startswith("application/hl7-v2"):
        media_type = f"{base}; charset=utf-8"
    return PacedResponse(
        answer.body,
        answer.status,
        media_type=media_type,
        headers=NO_STORE,
        record=record,
        timeout_s=server.body_timeout_s,
    )
