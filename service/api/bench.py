"""``/bench``: the rule owner's bench, a page and its small script, and the calls they make.

On unless ``OXYRULE_BENCH=false`` (production deployments set it off). It is for local use by
the people who own the rules: load a case (a FHIR Bundle, an HL7 v2 message, a fixture or a
built-in invented scenario), see its verdict, rules, partition and charts, change an input and
see the service assess it again, run the rule set's fixtures, save a case as a fixture.

* Nothing is stored: every call carries the case it is about and forgets it when answered.
* Nothing bypasses authentication: the bench's paths are not public, so when keys or JWTs are
  configured each needs the same credentials as the assess operation (``CredentialsMiddleware``).
* Nothing is fetched from elsewhere: the page, its script and its style are files of this
  package; the Content-Security-Policy allows the page only its own origin.
* No physiology or rule runs in the browser: the script lays out what these calls return, and
  every what-if is assessed here, by the same runtime as ``POST /fhir/$assess-hypoxaemia``
  (``service.workbench.bench``).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import orjson
from fastapi import APIRouter, Request, Response
from starlette.concurrency import run_in_threadpool

from service.api.body import bounded_body
from service.api.deps import caller_of, pressure_unit, service_of
from service.api.errors import ApiError
from service.api.state import ServiceState
from service.assess.presentation import PressureUnit
from service.assess.result import CAUTION
from service.workbench import bench
from service.workbench.whatif import WhatIf

STATIC = Path(__file__).resolve().parent / "bench_static"
FILES = {
    "bench.js": "text/javascript; charset=utf-8",
    "bench.css": "text/css; charset=utf-8",
}
PAGE = "bench.html"
POLICY = (
    "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data:; "
    "connect-src 'self'; form-action 'none'; frame-ancestors 'none'; base-uri 'none'"
)
HEADERS = {
    "Content-Security-Policy": POLICY,
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "Cache-Control": "no-store",
}


def _json(data: object, status: int = 200) -> Response:
    return Response(
        orjson.dumps(data), status_code=status, media_type="application/json", headers=HEADERS
    )


def _refused(error: bench.BenchError) -> ApiError:
    issues = [
        {"severity": "error", "code": "invalid", "diagnostics": problem}
        for problem in error.problems
    ]
    return ApiError(422, {"resourceType": "OperationOutcome", "issue": issues})


async def _body(request: Request, service: ServiceState) -> dict[str, Any]:
    server = service.server
    async with bounded_body(
        request, server.max_body_bytes, server.body_timeout_s, service.budget, "body"
    ) as raw:
        try:
            data = orjson.loads(raw)
        except orjson.JSONDecodeError as exc:
            raise ApiError.issue(
                400, "structure", f"the body is not JSON ({exc.msg})", "body"
            ) from exc
    if not isinstance(data, dict):
        raise ApiError.issue(400, "structure", "the body must be a JSON object", "body")
    return data


def _text(data: dict[str, Any], key: str, *, required: bool = True) -> str | None:
    value = data.get(key)
    if value is None and not required:
        return None
    if not isinstance(value, str) or (required and not value.strip()):
        raise ApiError.issue(400, "required", f"{key}: a non-empty text is needed", f"body.{key}")
    return value


def _unit(data: dict[str, Any], service: ServiceState) -> PressureUnit:
    units = data.get("units")
    chosen = pressure_unit(units if isinstance(units, str) else None)
    return chosen or service.runtime.settings.pressure_unit


def _what_if(data: dict[str, Any], unit: PressureUnit) -> WhatIf:
    values = data.get("what_if") or {}
    if not isinstance(values, dict):
        raise ApiError.issue(400, "structure", "what_if: an object is needed", "body.what_if")
    try:
        return bench.what_if_from(values, unit)
    except bench.BenchError as exc:
        raise _refused(exc) from None


def _folders(service: ServiceState) -> list[Path]:
    return bench.fixture_dirs(service.runtime, service.server.fixtures_dir)


async def bench_page(request: Request) -> Response:
    """The bench's page."""
    caller_of(request)
    return Response(_PAGE, media_type="text/html; charset=utf-8", headers=HEADERS)


async def bench_file(request: Request, name: str) -> Response:
    """The page's script and style (those two files only)."""
    caller_of(request)
    if name not in _FILES:
        raise ApiError.issue(404, "not-found", "no such bench file", "http.path")
    return Response(_FILES[name], media_type=FILES[name], headers=HEADERS)


async def bench_info(request: Request) -> Response:
    """The rule set, the site file in force, the scenarios and where the fixtures are."""
    caller_of(request)
    service = service_of(request)
    runtime = service.runtime
    return _json(
        {
            "ruleset": runtime.ruleset.identity,
            "ruleset_title": runtime.ruleset.title,
            "site": runtime.site_view.as_json() if runtime.site_view else None,
            "units": runtime.settings.pressure_unit,
            "scenarios": bench.scenarios(),
            "fixtures": [str(f) for f in _folders(service)],
            "caution": CAUTION,
        }
    )


async def bench_scenario(request: Request, name: str) -> Response:
    """One built-in invented scenario's Bundle."""
    caller_of(request)
    try:
        return _json(bench.scenario(name))
    except bench.BenchError as exc:
        raise _refused(exc) from None


async def bench_assess(request: Request) -> Response:
    """A case (with any what-if and expected outcome) assessed, as the bench shows it."""
    caller_of(request)
    service = service_of(request)
    data = await _body(request, service)
    unit = _unit(data, service)
    raw = (_text(data, "input") or "").encode("utf-8")
    what_if, expected = _what_if(data, unit), _text(data, "expected", required=False)
    try:
        shown = bench.view(service.runtime, raw, what_if=what_if, unit=unit, expected=expected)
    except bench.BenchError as exc:
        raise _refused(exc) from None
    return _json(shown)


async def bench_export(request: Request) -> Response:
    """A case (with any what-if) as fixture files: its Bundle and its expected outcome."""
    caller_of(request)
    service = service_of(request)
    data = await _body(request, service)
    unit = _unit(data, service)
    raw = (_text(data, "input") or "").encode("utf-8")
    name = _text(data, "name") or ""
    description = _text(data, "description", required=False) or ""
    what_if = _what_if(data, unit)
    try:
        made = bench.export_fixture(
            service.runtime, raw, what_if=what_if, name=name, description=description
        )
    except bench.BenchError as exc:
        raise _refused(exc) from None
    return _json(made)


async def bench_fixtures(request: Request) -> Response:
    """Every fixture of the rule set run, with each failure's differences."""
    caller_of(request)
    service = service_of(request)
    try:  # a whole fixture run takes seconds: off the event loop
        run = await run_in_threadpool(bench.run_fixtures, service.runtime, _folders(service))
    except bench.BenchError as exc:
        raise _refused(exc) from None
    return _json(run)


async def bench_fixture_case(request: Request, name: str) -> Response:
    """One fixture's input and expected outcome, by its name in the run."""
    caller_of(request)
    try:
        return _json(bench.fixture_case(_folders(service_of(request)), name))
    except bench.BenchError as exc:
        raise _refused(exc) from None


_PAGE = (STATIC / PAGE).read_bytes()
_FILES = {name: (STATIC / name).read_bytes() for name in FILES}


def router() -> APIRouter:
    """The bench's routes (added only when the bench is on; not in the OpenAPI document)."""
    routes = APIRouter(tags=["bench"], include_in_schema=False)
    routes.add_api_route("/bench", bench_page, methods=["GET"])
    routes.add_api_route("/bench/static/{name}", bench_file, methods=["GET"])
    routes.add_api_route("/bench/api/info", bench_info, methods=["GET"])
    routes.add_api_route("/bench/api/scenario", bench_scenario, methods=["GET"])
    routes.add_api_route("/bench/api/assess", bench_assess, methods=["POST"])
    routes.add_api_route("/bench/api/fixture", bench_export, methods=["POST"])
    routes.add_api_route("/bench/api/fixtures", bench_fixtures, methods=["GET"])
    routes.add_api_route("/bench/api/fixture", bench_fixture_case, methods=["GET"])
    return routes
