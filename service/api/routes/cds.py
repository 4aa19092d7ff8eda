"""CDS Hooks 2.0 over HTTP: discovery, the hook services and their feedback endpoints.

``GET /cds-services``, ``POST /cds-services/{id}`` and ``POST /cds-services/{id}/feedback``.
Every call is checked against the EHR's signed JWT first (``service.cds.trust``; the
service's own API keys and bearer JWTs do not apply here), then the body is read within the
same size and time limits as ``$assess-hypoxaemia``. Answers are JSON (``{"services": ...}``,
``{"cards": [...]}``, an empty 200 for feedback); refusals are OperationOutcomes, as the
specification recommends, with the HTTP status it names (412 when the data cannot be had).
The work is done by ``service.cds.hooks.CdsHooks``; this module only speaks HTTP, counts and
logs - never a patient value, an identifier or a token.
"""

from __future__ import annotations

import logging
from typing import Any

import orjson
from fastapi import APIRouter, Request, Response

from service.api.body import bounded_body
from service.api.deps import record_of, service_of
from service.api.errors import ApiError
from service.api.logs import REQUEST_LOGGER
from service.api.middleware import CDS_PATH
from service.api.state import ServiceState
from service.cds.errors import CdsError

router = APIRouter(tags=["CDS Hooks"])
log = logging.getLogger(REQUEST_LOGGER)

JSON_TYPES = frozenset({"application/json", "application/fhir+json"})
NO_STORE = {"Cache-Control": "no-store"}


def _refused(service: ServiceState, error: CdsError) -> ApiError:
    service.metrics.cds_refusal(error.status, error.issues[0].code)
    return ApiError(error.status, error.operation_outcome(), error.headers)


async def _json(request: Request, service: ServiceState) -> Any:
    """The body as JSON, within the size and time limits (413, 408), or a 415/400 refusal."""
    media = (request.headers.get("content-type") or "application/json").split(";")[0]
    if media.strip().lower() not in JSON_TYPES:
        raise CdsError.one(
            415, "not-supported", "send the body as application/json", "http.Content-Type"
        )
    server = service.server
    async with bounded_body(
        request, server.max_body_bytes, server.body_timeout_s, service.budget, "$"
    ) as raw:
        record_of(request).bytes_in = len(raw)
        try:
            return orjson.loads(raw)
        except orjson.JSONDecodeError as exc:
            raise CdsError.one(400, "structure", f"the body is not JSON ({exc.msg})", "$") from exc


@router.get(CDS_PATH)
async def cds_discovery(request: Request) -> Response:
    """CDS Hooks discovery: the services offered, their hooks and prefetch templates."""
    service = service_of(request)
    try:
        await service.cds.verify(request.headers.get("authorization"), CDS_PATH)
    except CdsError as error:
        raise _refused(service, error) from error
    return Response(service.cds.discovery_body, media_type="application/json")


@router.post(CDS_PATH + "/{service_id}")
async def cds_service(request: Request, service_id: str) -> Response:
    """Call a CDS service: a hook request in, ``{"cards": [...]}`` out (possibly empty).

    Decision support for qualified clinicians, not a diagnosis.
    """
    service, record = service_of(request), record_of(request)
    path = request.url.path
    try:
        await service.cds.verify(request.headers.get("authorization"), path)
        definition = service.cds.service(service_id)
        body = await _json(request, service)
        answer = await service.cds.call(definition, body, service.runtime)
    except CdsError as error:
        raise _refused(service, error) from error
    record.pattern = answer.pattern
    service.metrics.verdict(answer.pattern, answer.findings)
    indicators = [str(card["indicator"]) for card in answer.cards]
    service.metrics.cds_answer(definition.id, indicators, answer.fetched)
    log.info(
        "cds cards",
        extra={
            "correlation_id": record.correlation_id,
            "cds_service": definition.id,
            "cards": len(answer.cards),
            "indicator": ",".join(indicators) or None,
            "reason": answer.quiet,
            "pattern": answer.pattern,
        },
    )
    body_out = orjson.dumps({"cards": answer.cards})
    return Response(body_out, media_type="application/json", headers=NO_STORE)


@router.post(CDS_PATH + "/{service_id}/feedback")
async def cds_feedback(request: Request, service_id: str) -> Response:
    """Feedback on our cards: accepted suggestions and overrides, counted and logged."""
    service, record = service_of(request), record_of(request)
    path = request.url.path
    try:
        await service.cds.verify(
            request.headers.get("authorization"), path, path.removesuffix("/feedback")
        )
        definition = service.cds.service(service_id)
        items = service.cds.feedback(await _json(request, service))
    except CdsError as error:
        raise _refused(service, error) from error
    for item in items:
        labels = (("service", definition.id), ("outcome", item.outcome), ("reason", item.reason))
        service.metrics.cds_feedback.inc(labels)
        log.info(
            "cds feedback",
            extra={
                "correlation_id": record.correlation_id,
                "cds_service": definition.id,
                "card": item.card,
                "outcome": item.outcome,
                "reason": item.reason,
                "accepted_suggestions": item.accepted_suggestions,
            },
        )
    return Response(status_code=200)
