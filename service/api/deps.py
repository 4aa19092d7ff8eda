"""Request dependencies, as ``Annotated`` aliases the routes name in their signatures."""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Query, Request
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer

from service.api.auth import Caller
from service.api.errors import ApiError
from service.api.state import RequestRecord, ServiceState
from service.fhir.render import PressureUnit

UNITS: dict[str, PressureUnit] = {"mm[Hg]": "mm[Hg]", "kPa": "kPa"}

# Documents the bearer scheme in OpenAPI; the token itself is checked by ``Authenticator``.
_bearer = HTTPBearer(auto_error=False, description="static API key or JWT, when configured")


def get_service(request: Request) -> ServiceState:
    service: ServiceState = request.app.state.service
    return service


ServiceDep = Annotated[ServiceState, Depends(get_service)]


def get_record(request: Request) -> RequestRecord:
    record: RequestRecord = request.state.record
    return record


RecordDep = Annotated[RequestRecord, Depends(get_record)]


def authenticate(
    request: Request,
    service: ServiceDep,
    _credentials: Annotated[HTTPAuthorizationCredentials | None, Depends(_bearer)],
) -> Caller:
    return service.auth.check(request.headers.get("authorization"))


CallerDep = Annotated[Caller, Depends(authenticate)]


def pressure_unit(
    units: Annotated[
        str | None, Query(description="pressure unit of the result: mm[Hg] (default) or kPa")
    ] = None,
) -> PressureUnit | None:
    if units is None:
        return None
    if units not in UNITS:
        raise ApiError.issue(400, "value", f"units must be one of {', '.join(UNITS)}", "http.units")
    return UNITS[units]


UnitsDep = Annotated[PressureUnit | None, Depends(pressure_unit)]

FormatDep = Annotated[
    str | None,
    Query(
        alias="_format",
        description="answer media type: json, application/fhir+json, application/json; "
        "for NDJSON bodies ndjson, application/fhir+ndjson, application/ndjson",
    ),
]
