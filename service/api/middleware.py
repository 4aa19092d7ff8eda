"""The outermost layer of every HTTP request: correlation id, limits, metrics, log, last resort.

A pure ASGI middleware (no per-request task or body buffering), so that a streamed NDJSON
answer is timed and counted whole. For each request it

* gives a fresh correlation id (``X-Correlation-ID`` on the answer, in the log line and in a
  500's diagnostics); a caller's own id is not reused, as it might carry an identifier;
* refuses an assessment with 429 when ``max_concurrent_requests`` are already in flight in
  this process (health and metadata routes are never limited, so probes still answer);
* records a client that went away before its body arrived (``ClientDisconnect``) as status
  499, the convention of common proxies, without an error: that is the client's doing;
* turns any exception that escaped the app into a 500 OperationOutcome without a traceback,
  logged with the correlation id, the exception type and its frames, never its text;
* writes one JSON log line and updates the request metrics.

``CredentialsMiddleware``, inside it and inside CORS (so that a refusal still carries the CORS
headers a browser needs to read it), checks the caller's credentials when authentication is
configured, on every path but the public ones (``PUBLIC``: liveness, readiness and the
CapabilityStatement, which FHIR and SMART clients read to learn how to authenticate) and CORS
preflights (browsers send no credentials with those). A refusal is a 401/403 OperationOutcome
before any routing, so an unauthenticated caller learns nothing of the routes, the docs or the
metrics.
"""

from __future__ import annotations

import logging
import time
import traceback
import uuid
from typing import Any

from starlette.datastructures import MutableHeaders
from starlette.requests import ClientDisconnect
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.api.errors import ApiError, outcome, outcome_response
from service.api.logs import REQUEST_LOGGER
from service.api.reload import follow_generation
from service.api.state import RequestRecord, ServiceState
from service.cds.services import SERVICES

log = logging.getLogger(REQUEST_LOGGER)

ASSESS_PATH = "/fhir/$assess-hypoxaemia"
V2_PATH = "/hl7v2"
CDS_PATH = "/cds-services"
CDS_SERVICE_PATHS = frozenset(f"{CDS_PATH}/{service_id}" for service_id in SERVICES)
CDS_FEEDBACK_PATHS = frozenset(f"{path}/feedback" for path in CDS_SERVICE_PATHS)
# The routes that assess: counted in flight.
LIMITED = frozenset({ASSESS_PATH, V2_PATH}) | CDS_SERVICE_PATHS
# Open without credentials even when authentication is configured.
PUBLIC = frozenset({"/healthz", "/readyz", "/fhir/metadata", "/fhir/$versions"})
CLIENT_CLOSED = 499  # the client closed the connection before the answer (proxies' convention)
ROUTES = frozenset(
    {
        ASSESS_PATH,
        V2_PATH,
        CDS_PATH,
        *CDS_SERVICE_PATHS,
        *CDS_FEEDBACK_PATHS,
        "/fhir/metadata",
        "/fhir/$versions",
        "/fhir/OperationDefinition/assess-hypoxaemia",
        "/healthz",
        "/readyz",
        "/metrics",
        "/docs",
        "/openapi.json",
    }
)


def route_label(path: str) -> str:
    """The route for logs and metrics: a known path, ``/bench`` for any of the bench's, or
    ``other`` (bounded label values)."""
    if path in ROUTES:
        return path
    return "/bench" if path == "/bench" or path.startswith("/bench/") else "other"


def _header(scope: Scope, name: bytes) -> str | None:
    for key, value in scope["headers"]:
        if key == name:
            text: str = value.decode("latin-1")
            return text
    return None


def is_cds(path: str) -> bool:
    """A CDS Hooks path: authenticated by the EHR's signed JWT instead (``service.cds.trust``)."""
    return path == CDS_PATH or path.startswith(CDS_PATH + "/")


def needs_credentials(scope: Scope) -> bool:
    """Whether this request must carry credentials (when authentication is configured)."""
    if scope["path"] in PUBLIC or is_cds(scope["path"]):
        return False
    preflight = scope["method"] == "OPTIONS" and _header(scope, b"access-control-request-method")
    return not preflight


def frames(exc: BaseException) -> list[str]:
    """Where an exception passed, as ``file:line function``, without its message or locals."""
    return [
        f"{frame.filename.rsplit('/', 2)[-1]}:{frame.lineno} {frame.name}"
        for frame in traceback.extract_tb(exc.__traceback__)[-8:]
    ]


class RequestMiddleware:
    """See the module docstring."""

    def __init__(self, app: ASGIApp, service: ServiceState) -> None:
        self.app = app
        self.service = service

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        started = time.perf_counter()
        record = RequestRecord(uuid.uuid4().hex, scope["method"], route_label(scope["path"]))
        scope.setdefault("state", {})["record"] = record
        answered = False

        service = self.service

        limited = record.route in LIMITED
        flight = _Flight(service)

        async def send_with_id(message: Message) -> None:
            nonlocal answered
            if message["type"] == "http.response.body" and not message.get("more_body"):
                # The last of the answer: its work is done. Released here, not when the app
                # returns, because the client may already have its answer and sent the next
                # request while the app's exit work (after its last send) waits its turn on
                # the loop; counted until then, a client keeping exactly the limit's number
                # of connections busy met 429s (measured: 40 % of them at 64 connections).
                await send(message)
                flight.release()
                return
            if message["type"] == "http.response.start":
                answered = True
                record.status = message["status"]
                headers = MutableHeaders(scope=message)
                headers.append("X-Correlation-ID", record.correlation_id)
                if service.draining and "connection" not in headers:
                    # Shutting down: a keep-alive client must not send its next request on
                    # this connection (it would be reset); it reconnects, to another pod.
                    headers.append("Connection", "close")
            await send(message)

        try:
            if service.generations is not None:
                await follow_generation(service)
            if limited and service.in_flight >= service.server.max_concurrent_requests:
                body = outcome(
                    "throttled",
                    f"more than {service.server.max_concurrent_requests} assessments in "
                    "progress; retry shortly (setting OXYRULE_MAX_CONCURRENT_REQUESTS)",
                    "http.request",
                )
                response = outcome_response(429, body, {"Retry-After": "1"})
                await response(scope, receive, send_with_id)
                return
            if limited:
                flight.enter()
            try:
                await self.app(scope, receive, send_with_id)
            finally:
                flight.release()
        except ClientDisconnect:
            record.status = record.status or CLIENT_CLOSED  # nobody is left to answer
        except Exception as exc:  # the last resort: no 500 leaves with a traceback
            log.error(
                "internal error",
                extra={
                    "correlation_id": record.correlation_id,
                    "route": record.route,
                    "error_type": type(exc).__name__,
                    "frames": frames(exc),
                },
            )
            if answered:  # a streamed answer broke off: nothing more can be sent
                record.status = record.status or 500
            else:
                body = outcome(
                    "exception",
                    "internal error; nothing about the input was stored. Quote correlation id "
                    f"{record.correlation_id} when reporting it.",
                    "http.request",
                )
                await outcome_response(500, body)(scope, receive, send_with_id)
        finally:
            seconds = time.perf_counter() - started
            service.metrics.request(record.route, record.method, record.status, seconds)
            _log_request(record, seconds)


class _Flight:
    """One limited request's place among the assessments in flight: taken once, given back
    once, whichever comes first of its answer's last byte and the app's return."""

    __slots__ = ("counted", "service")

    def __init__(self, service: ServiceState) -> None:
        self.service = service
        self.counted = False

    def enter(self) -> None:
        self.counted = True
        self.service.in_flight += 1
        self.service.metrics.in_flight.set(self.service.in_flight)

    def release(self) -> None:
        if self.counted:
            self.counted = False
            self.service.in_flight -= 1
            self.service.metrics.in_flight.set(self.service.in_flight)


class CredentialsMiddleware:
    """See the module docstring; added only when authentication is configured."""

    def __init__(self, app: ASGIApp, service: ServiceState) -> None:
        self.app = app
        self.auth = service.auth

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] == "http" and needs_credentials(scope):
            try:
                caller = self.auth.check(_header(scope, b"authorization"))
            except ApiError as refusal:
                await refusal.response()(scope, receive, send)
                return
            scope.setdefault("state", {})["caller"] = caller
        await self.app(scope, receive, send)


def _log_request(record: RequestRecord, seconds: float) -> None:
    extra: dict[str, Any] = {
        "correlation_id": record.correlation_id,
        "method": record.method,
        "route": record.route,
        "status": record.status,
        "duration_ms": round(seconds * 1000, 3),
        "pattern": record.pattern,
        "lines": record.lines,
        "rejected": record.rejected,
        "bytes_in": record.bytes_in,
        "stream": record.stream,
    }
    log.info("request", extra=extra)
