"""What a route needs from a request: the service, the request's record, the caller, options.

Each is a plain function of the request, and an ``Annotated`` alias for routes that take it by
dependency injection. The assess route calls the functions directly instead: FastAPI's
dependency resolution measured ~100-150 µs per request for five dependencies, a large share
of the ~140 µs a bare request costs (tests/benchmarks/http.py), so its parameters are
documented in OpenAPI by hand (``routes/assess.py``).
"""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Query, Request

from service.api.auth import Caller
from service.api.errors import ApiError
from service.api.state import RequestRecord, ServiceState
from service.assess.presentation import PressureUnit

UNITS: dict[str, PressureUnit] = {"mm[Hg]": "mm[Hg]", "kPa": "kPa"}


def service_of(request: Request) -> ServiceState:
    """The app's loaded service."""
    service: ServiceState = request.app.state.service
    return service


def record_of(request: Request) -> RequestRecord:
    """What the request log line will say about this request (set by the middleware)."""
    record: RequestRecord = request.state.record
    return record


def caller_of(request: Request) -> Caller:
    """The authenticated caller (checked once, by the middleware), or a 401/403 ``ApiError``."""
    caller = request.scope.get("state", {}).get("caller")
    if isinstance(caller, Caller):
        return caller
    return service_of(request).auth.check(request.headers.get("authorization"))


def pressure_unit(units: str | None) -> PressureUnit | None:
    """The ``units`` parameter, checked: ``mm[Hg]``, ``kPa`` or absent."""
    if units is None:
        return None
    if units not in UNITS:
        raise ApiError.issue(400, "value", f"units must be one of {', '.join(UNITS)}", "http.units")
    return UNITS[units]


async def _service(request: Request) -> ServiceState:
    return service_of(request)


ServiceDep = Annotated[ServiceState, Depends(_service)]

FORMAT_DOC = (
    "answer media type: json, application/fhir+json, application/json; "
    "for NDJSON bodies ndjson, application/fhir+ndjson, application/ndjson"
)
FormatDep = Annotated[str | None, Query(alias="_format", description=FORMAT_DOC)]
UNITS_DOC = "pressure unit of the result: mm[Hg] (default) or kPa"
