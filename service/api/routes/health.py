"""``/healthz`` (the process answers), ``/readyz`` (rule set loaded) and ``/metrics``."""

from __future__ import annotations

import orjson
from fastapi import APIRouter, Response

from service.api.deps import ServiceDep
from service.api.errors import outcome, outcome_response

router = APIRouter(tags=["health"])

PROMETHEUS_TEXT = "text/plain; version=0.0.4; charset=utf-8"


@router.get("/healthz")
async def healthz() -> dict[str, str]:
    """Liveness: the process is up and answering."""
    return {"status": "ok"}


@router.get("/readyz", responses={503: {"description": "Shutting down (OperationOutcome)"}})
async def readyz(service: ServiceDep) -> Response:
    """Readiness: a rule set that passed every lint check is loaded (its identity and content
    hash are given) and the process is not shutting down."""
    if service.draining:
        body = outcome("transient", "shutting down", "http.request", severity="error")
        return outcome_response(503, body)
    runtime = service.runtime
    ruleset = runtime.ruleset
    ready: dict[str, object] = {
        "status": "ready",
        "ruleset": f"{ruleset.id}|{ruleset.version}",
        "ruleset_hash": ruleset.content_hash,  # what was loaded, byte for byte
    }
    if runtime.site_view is not None:
        ready["site"] = runtime.site_view.label
        ready["site_changes"] = runtime.site_view.summary()
    ready["settings_hash"] = runtime.settings_hash
    return Response(orjson.dumps(ready), media_type="application/json")


@router.get("/metrics", response_class=Response)
async def metrics(service: ServiceDep) -> Response:
    """Prometheus text: requests by route and status, latency, verdicts and findings, HL7 v2
    messages by transport and MSA-1, MLLP connections, bytes buffered (counts only)."""
    service.metrics.buffered_bytes.set(service.budget.used, (("budget", "http"),))
    return Response(service.metrics.render(), media_type=PROMETHEUS_TEXT)
