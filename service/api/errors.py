"""HTTP errors as FHIR OperationOutcomes.

Every non-2xx answer of the service is an OperationOutcome whose issue ``code`` comes from the
HL7 issue-type set and whose ``expression`` locates the fault: an element of the input
(``Bundle.entry[3].resource.valueQuantity.code``) or, for the HTTP envelope, ``http.`` and the
header or parameter name (``http.Content-Type``, ``http._format``), as FHIR R4 advises for
HTTP errors. Diagnostics never quote a patient's value, name or identifier.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Literal

import orjson
from starlette.responses import Response

FHIR_JSON = "application/fhir+json"

# The issue types (http://hl7.org/fhir/issue-type) the HTTP layer emits.
HttpIssueType = Literal[
    "invalid",
    "structure",
    "required",
    "value",
    "code-invalid",
    "not-supported",
    "not-found",
    "too-long",
    "throttled",
    "login",
    "expired",
    "security",
    "forbidden",
    "exception",
    "transient",
    "timeout",
]


def outcome(
    code: HttpIssueType,
    diagnostics: str,
    expression: str | None = None,
    *,
    severity: str = "error",
) -> dict[str, object]:
    """An OperationOutcome with one issue. ``expression`` is a FHIRPath into the resource sent,
    or a part of the HTTP request (``http.`` and a header or parameter name, FHIR's convention),
    which goes to ``issue.location``: it is not FHIRPath. None or '': nothing to name."""
    issue: dict[str, object] = {"severity": severity, "code": code, "diagnostics": diagnostics}
    if expression and expression.startswith(HTTP_LOCATION):
        issue["location"] = [expression]
    elif expression:
        issue["expression"] = [expression]
    return {"resourceType": "OperationOutcome", "issue": [issue]}


HTTP_LOCATION = "http."


class ApiError(Exception):
    """A refusal: the HTTP status, and the OperationOutcome that explains it."""

    def __init__(
        self,
        status: int,
        body: Mapping[str, object],
        headers: Mapping[str, str] | None = None,
    ) -> None:
        self.status = status
        self.body = body
        self.headers = dict(headers or {})
        super().__init__(f"{status}: {_first_diagnostics(body)}")

    @classmethod
    def issue(
        cls,
        status: int,
        code: HttpIssueType,
        diagnostics: str,
        expression: str | None = None,
        headers: Mapping[str, str] | None = None,
    ) -> ApiError:
        """A refusal with a single located issue."""
        return cls(status, outcome(code, diagnostics, expression), headers)

    def response(self) -> Response:
        return outcome_response(self.status, self.body, self.headers)


def _first_diagnostics(body: Mapping[str, object]) -> str:
    issues = body.get("issue")
    if isinstance(issues, Sequence) and issues and isinstance(issues[0], Mapping):
        return str(issues[0].get("diagnostics", ""))
    return ""


def outcome_response(
    status: int, body: Mapping[str, object], headers: Mapping[str, str] | None = None
) -> Response:
    """An OperationOutcome as an ``application/fhir+json`` response."""
    return Response(orjson.dumps(body), status, dict(headers or {}), media_type=FHIR_JSON)


# Issue code, text and location for the statuses Starlette or FastAPI may produce on their
# own. The location is the part of the HTTP request at fault (FHIR: ``http.`` and a header or
# parameter name; the URL's path and the method for 404 and 405).
STATUS_ISSUE: dict[int, tuple[HttpIssueType, str, str]] = {
    400: ("invalid", "the request is not valid", "http.request"),
    401: ("login", "authentication is required", "http.Authorization"),
    403: ("forbidden", "not allowed", "http.Authorization"),
    404: (
        "not-found",
        "no such endpoint (paths end without a slash); the operation is "
        "POST /fhir/$assess-hypoxaemia",
        "http.path",
    ),
    405: ("not-supported", "this method is not supported on this endpoint", "http.method"),
    406: ("not-supported", "no acceptable response format", "http.Accept"),
    408: ("timeout", "the request did not arrive in time", "http.request"),
    413: ("too-long", "the request is too large", "http.Content-Length"),
    415: ("not-supported", "unsupported media type", "http.Content-Type"),
    429: ("throttled", "too many requests in progress; retry shortly", "http.request"),
}


def status_outcome(status: int, detail: str | None = None) -> dict[str, object]:
    """The OperationOutcome for a bare HTTP status (a route Starlette answered itself)."""
    fallback: tuple[HttpIssueType, str, str] = (
        "exception" if status >= 500 else "invalid",
        "",
        "http.request",
    )
    code, text, where = STATUS_ISSUE.get(status, fallback)
    return outcome(code, detail or text or f"HTTP {status}", where)
