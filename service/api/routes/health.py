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
    """Readiness: the rule set is loaded and the process is not shutting down."""
    if service.draining:
        return outcome_response(503, outcome("transient", "shutting down", severity="error"))
    runtime = service.runtime
    ruleset = runtime.ruleset
    body: dict[str, object] = {"status": "ready", "ruleset": f"{ruleset.id}|{ruleset.version}"}
    if runtime.site_view is not None:
        body["site"] = runtime.site_view.label
        body["site_changes"] = runtime.site_view.summary()
    body["settings_hash"] = runtime.settings_hash
    return Response(orjson.dumps(body), media_type="application/json")


@router.get("/metrics", response_class=Response)
async def metrics(service: ServiceDep) -> Response:
    """Prometheus text: requests by route and status, latency, verdicts and findings (counts)."""
    return Response(service.metrics.render(), media_type=PROMETHEUS_TEXT)
