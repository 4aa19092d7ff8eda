"""CORS for browser clients, off unless ``OXYRULE_CORS_ORIGINS`` lists origins.

Starlette's middleware, with one change: a refused preflight is answered by an
OperationOutcome like every other non-2xx answer of the service.
"""

from __future__ import annotations

from starlette.datastructures import Headers
from starlette.middleware.cors import CORSMiddleware
from starlette.responses import Response

from service.api.errors import outcome, outcome_response


class FhirCorsMiddleware(CORSMiddleware):
    """``CORSMiddleware`` whose refusals are FHIR OperationOutcomes."""

    def preflight_response(self, request_headers: Headers) -> Response:
        response = super().preflight_response(request_headers)
        if response.status_code < 400:
            return response
        reason = bytes(response.body).decode() if response.body else "Disallowed CORS request"
        headers = {k: v for k, v in response.headers.items() if k.lower().startswith("access-")}
        headers["Vary"] = "Origin"
        return outcome_response(400, outcome("security", reason, "http.Origin"), headers)
