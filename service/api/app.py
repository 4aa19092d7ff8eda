"""The FastAPI application, built by ``create_app``; nothing happens at import.

``create_app(settings)`` loads the rule set (once: a broken one raises ``RuleSetError`` here,
before any request), builds the credentials checker and the conformance resources, and wires
the routes, the request middleware and the FHIR error handlers. Every non-2xx answer is an
OperationOutcome (``service.api.errors``).
"""

from __future__ import annotations

from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from typing import Any

from fastapi import FastAPI, Request, Response
from fastapi.exceptions import RequestValidationError
from fastapi.openapi.docs import get_swagger_ui_html
from fastapi.responses import HTMLResponse
from starlette.exceptions import HTTPException
from starlette.staticfiles import StaticFiles
from swagger_ui_bundle import swagger_ui_path

from service import __version__
from service.api.auth import Authenticator
from service.api.cors import FhirCorsMiddleware
from service.api.errors import ApiError, outcome_response, status_outcome
from service.api.metrics import Metrics
from service.api.middleware import CredentialsMiddleware, RequestMiddleware
from service.api.openapi import complete
from service.api.reload import handle_sighup, install_runtime, stop_handling_sighup
from service.api.routes import assess, cds, conformance, health, hl7v2
from service.api.state import ServiceState
from service.assess.result import CAUTION
from service.cds.hooks import CdsHooks
from service.config import ServerSettings, Settings
from service.hl7v2.message import V2Limits
from service.hl7v2.mllp import MllpHooks, MllpLimits
from service.runtime import Runtime
from service.workbench.lint import verified_runtime

DESCRIPTION = (
    "Grades the likely mechanism of hypoxaemia (low inspired oxygen, hypoventilation, "
    "diffusion limitation, V/Q mismatch, shunt) from FHIR Bundles of blood-gas Observations. "
    "Errors are FHIR OperationOutcomes. " + CAUTION
)


async def _api_error(_request: Request, exc: Exception) -> Response:
    assert isinstance(exc, ApiError)
    return exc.response()


async def _http_error(_request: Request, exc: Exception) -> Response:
    assert isinstance(exc, HTTPException)
    headers = dict(exc.headers or {})
    return outcome_response(exc.status_code, status_outcome(exc.status_code), headers)


async def _validation_error(_request: Request, exc: Exception) -> Response:
    assert isinstance(exc, RequestValidationError)
    issues = []
    for error in exc.errors():
        where, *path = (str(part) for part in error.get("loc", ()))
        name = ".".join(path) or where
        # A query parameter, header or path part is an HTTP location (issue.location, FHIR's
        # ``http.`` convention), not FHIRPath.
        http = where in ("query", "header", "path")
        issues.append(
            {
                "severity": "error",
                "code": "invalid",
                "diagnostics": f"{name}: {error.get('msg', 'invalid')}",
                "location" if http else "expression": [("http." if http else "") + name],
            }
        )
    return outcome_response(400, {"resourceType": "OperationOutcome", "issue": issues})


def _openapi(app: FastAPI) -> dict[str, Any]:
    """FastAPI's schema, made true to the answers (``service.api.openapi``), with the bearer
    scheme every protected route names."""
    if app.openapi_schema is None:
        from fastapi.openapi.utils import get_openapi

        schema = complete(
            get_openapi(
                title=app.title,
                version=app.version,
                description=app.description,
                routes=app.routes,
            )
        )
        schemes = schema.setdefault("components", {}).setdefault("securitySchemes", {})
        schemes["bearer"] = {
            "type": "http",
            "scheme": "bearer",
            "description": "A static API key or a JWT, when the service is configured for them",
        }
        schemes["cdsClientJwt"] = {
            "type": "http",
            "scheme": "bearer",
            "bearerFormat": "JWT",
            "description": "CDS Hooks: the EHR's signed JWT (ES384 or RS384), aud the exact URL "
            "of the endpoint called; not needed when OXYRULE_CDS_ALLOW_UNSIGNED is set",
        }
        app.openapi_schema = schema
    return app.openapi_schema


DOCS_ASSETS = "/docs/assets"


def _serve_docs(app: FastAPI) -> None:
    """``GET /docs``: Swagger UI with its script, styles and icon served from the
    swagger-ui-bundle-v2 package (FastAPI's documented self-hosting of the docs' static
    files), so the page works in a network with no way out and pulls nothing from elsewhere."""
    app.mount(DOCS_ASSETS, StaticFiles(directory=swagger_ui_path), name="docs-assets")

    @app.get("/docs", include_in_schema=False)
    async def docs() -> HTMLResponse:
        return get_swagger_ui_html(
            openapi_url="/openapi.json",
            title="oxyrule: API",
            swagger_js_url=f"{DOCS_ASSETS}/swagger-ui-bundle.js",
            swagger_css_url=f"{DOCS_ASSETS}/swagger-ui.css",
            swagger_favicon_url=f"{DOCS_ASSETS}/favicon-32x32.png",
            # No validator badge: Swagger UI would ask an outside validator about the document.
            swagger_ui_parameters={"validatorUrl": None},
        )


def mllp_limits(server: ServerSettings, message: V2Limits) -> MllpLimits:
    """The MLLP listener's budgets from the settings."""
    return MllpLimits(
        max_frame_bytes=server.mllp_max_frame_bytes,
        idle_timeout_s=server.mllp_idle_timeout_s,
        max_connections=server.mllp_max_connections,
        max_buffered_bytes=server.mllp_max_buffered_bytes,
        message=message,
    )


def mllp_hooks(metrics: Metrics) -> MllpHooks:
    """What the MLLP listener reports, counted in ``/metrics``."""
    return MllpHooks(
        message=lambda ack: metrics.v2_message("mllp", ack),
        connections=lambda n: metrics.mllp_connections.set(n),
        refused=lambda why: metrics.mllp_refused.inc((("reason", why),)),
    )


def create_app(
    settings: Settings | None = None,
    server: ServerSettings | None = None,
    *,
    runtime: Runtime | None = None,
) -> FastAPI:
    """The service app. Loads the rule set unless a loaded ``runtime`` is given, and only one
    that passes every check of ``oxyrule lint`` (``verified_runtime``).

    Raises:
        RuleSetError, SiteFileError, LocatedError: the rule set (or site file, code map) is
            broken: the service must not start.
        RuleSetRefused: the rule set loads but lint rejects it (a rule file deleted, say).
        AuthConfigError: the authentication settings cannot be used.
        CdsConfigError: a CDS client's inline JWK Set cannot be used.
    """
    server = server or ServerSettings()
    settings = settings or (runtime.settings if runtime is not None else Settings())
    runtime = runtime or verified_runtime(settings)
    auth = Authenticator.from_settings(server)
    hooks = CdsHooks(server)
    service = ServiceState(runtime=runtime, server=server, auth=auth, settings=settings, cds=hooks)
    install_runtime(service, runtime)

    @asynccontextmanager
    async def lifespan(_app: FastAPI) -> AsyncIterator[None]:
        listener = None
        if server.mllp_port is not None:
            from service.hl7v2.mllp import start_mllp

            listener = await start_mllp(
                lambda: service.runtime,  # a reload reaches the MLLP listener too
                server.host,
                server.mllp_port,
                limits=mllp_limits(server, service.v2_limits),
                work=service.work,
                hooks=mllp_hooks(service.metrics),
            )
        reloads = handle_sighup(service)
        try:
            yield
        finally:
            service.draining = True
            if reloads:
                stop_handling_sighup()
            if listener is not None:
                listener.close()
                await listener.wait_closed()
            await hooks.aclose()
            service.work.close()

    app = FastAPI(
        title="oxyrule",
        version=__version__,
        description=DESCRIPTION,
        lifespan=lifespan,
        docs_url=None,  # served below, with the page's assets from the package
        redoc_url=None,
        # /healthz/ is not /healthz: a 404 saying so, not an empty 307 to follow.
        redirect_slashes=False,
        swagger_ui_oauth2_redirect_url=None,  # no OAuth flow in the docs page: one route fewer
    )
    app.state.service = service
    app.openapi = lambda: _openapi(app)  # type: ignore[method-assign]
    _serve_docs(app)
    app.include_router(assess.router)
    app.include_router(conformance.router)
    app.include_router(hl7v2.router)
    app.include_router(cds.router)
    app.include_router(health.router)
    if server.bench:  # the rule owner's bench (service.api.bench); off in production
        from service.api import bench

        app.include_router(bench.router())
    app.add_exception_handler(ApiError, _api_error)
    app.add_exception_handler(HTTPException, _http_error)
    app.add_exception_handler(RequestValidationError, _validation_error)
    if auth.enabled:
        app.add_middleware(CredentialsMiddleware, service=service)
    if server.cors_origins:
        app.add_middleware(
            FhirCorsMiddleware,
            allow_origins=server.cors_origins,
            allow_methods=["GET", "POST"],
            allow_headers=["Authorization", "Content-Type", "Accept"],
            expose_headers=["X-Correlation-ID"],
        )
    app.add_middleware(RequestMiddleware, service=service)
    return app
