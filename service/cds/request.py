"""A CDS Hooks request body, read and checked: every problem located, then refused once (400).

The fields of CDS Hooks 2.0 "Calling a CDS Service": ``hook`` (must be the service's hook),
``hookInstance`` (a UUID), ``fhirServer`` (a URL; required with ``fhirAuthorization``),
``fhirAuthorization`` (``access_token`` and ``token_type`` Bearer are required here; the
other fields are checked when present), ``context`` (``patientId`` always; ``draftOrders``
for the order hooks, ``selections`` for ``order-select`` when sent) and ``prefetch`` (key ->
resource, Bundle or ``null``). Fields this version does not define (``extension``, fields of
CDS Hooks 3.0) are ignored. Diagnostics name the element and what was expected; they never
quote a value, and never the access token.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass, field
from typing import Any
from urllib.parse import urlsplit

from service.cds.errors import CdsError, Issue
from service.cds.services import ORDER_SELECT, ORDER_SIGN, CdsService
from service.fhir.references import FHIR_ID
from service.fhir.shape import json_type

Json = dict[str, Any]


@dataclass(frozen=True, slots=True)
class FhirAccess:
    """Where and how the service may read the EHR's FHIR server. ``token`` is None when the
    client sent a ``fhirServer`` without ``fhirAuthorization`` (an open server)."""

    server: str
    token: str | None = field(repr=False)  # never printed, never logged


@dataclass(frozen=True, slots=True)
class HookRequest:
    """What one hook call brings."""

    hook: str
    hook_instance: str
    patient_id: str
    encounter_id: str | None
    user_id: str | None
    access: FhirAccess | None
    prefetch: dict[str, object] | None  # key -> value (None: the client has no data)
    draft_orders: Json | None = None
    selections: tuple[str, ...] | None = None

    @property
    def tokens(self) -> dict[str, str]:
        """Prefetch token values (``context.patientId``, ``context.encounterId``)."""
        values = {"context.patientId": self.patient_id}
        if self.encounter_id is not None:
            values["context.encounterId"] = self.encounter_id
        return values


class _Reader:
    """Collects every problem before refusing once."""

    def __init__(self) -> None:
        self.issues: list[Issue] = []

    def problem(self, code: str, diagnostics: str, expression: str) -> None:
        self.issues.append(Issue(code, diagnostics, expression))

    def member(
        self, parent: Json, name: str, at: str, kind: type, *, required: bool = False
    ) -> Any:
        path = f"{at}.{name}" if at else name
        if name not in parent:
            if required:
                self.problem("required", f"{path} is required", path)
            return None
        value = parent[name]
        if not isinstance(value, kind) or isinstance(value, bool) is not (kind is bool):
            expected = {str: "a string", dict: "an object", list: "an array", int: "a number"}
            self.problem(
                "structure",
                f"{path} must be {expected.get(kind, kind.__name__)}, not {json_type(value)}",
                path,
            )
            return None
        if isinstance(value, str) and not value.strip():
            self.problem("value", f"{path} must not be empty", path)
            return None
        return value

    def fhir_id(self, parent: Json, name: str, at: str, *, required: bool) -> str | None:
        value: str | None = self.member(parent, name, at, str, required=required)
        if value is not None and not FHIR_ID.fullmatch(value):
            self.problem(
                "value", f"{at}.{name} is not a FHIR id (1-64 of A-Z a-z 0-9 - .)", f"{at}.{name}"
            )
            return None
        return value


def _is_uuid(text: str) -> bool:
    try:
        uuid.UUID(text.removeprefix("urn:uuid:"))
    except ValueError:
        return False
    return True


def _access(body: Json, out: _Reader) -> FhirAccess | None:
    server = out.member(body, "fhirServer", "", str)
    if server is not None:
        parts = urlsplit(server)
        if parts.scheme not in ("http", "https") or not parts.netloc or parts.query:
            out.problem("value", "fhirServer must be an absolute http(s) base URL", "fhirServer")
            server = None
    auth = out.member(body, "fhirAuthorization", "", dict)
    if auth is None:
        return None if server is None else FhirAccess(server.rstrip("/"), None)
    at = "fhirAuthorization"
    token = out.member(auth, "access_token", at, str, required=True)
    kind = out.member(auth, "token_type", at, str, required=True)
    if kind is not None and kind.lower() != "bearer":
        out.problem("value", "fhirAuthorization.token_type must be Bearer", f"{at}.token_type")
    out.member(auth, "expires_in", at, int)
    out.member(auth, "scope", at, str)
    out.member(auth, "subject", at, str)
    if "fhirServer" not in body:
        out.problem(
            "required", "fhirServer is required when fhirAuthorization is sent", "fhirServer"
        )
    if server is None or token is None:
        return None
    return FhirAccess(server.rstrip("/"), token)


def _prefetch(body: Json, out: _Reader) -> dict[str, object] | None:
    prefetch = out.member(body, "prefetch", "", dict)
    if prefetch is None:
        return None
    for key, value in prefetch.items():
        if value is not None and not isinstance(value, dict):
            out.problem(
                "structure",
                f"prefetch.{key} must be a FHIR resource or null, not {json_type(value)}",
                f"prefetch.{key}",
            )
    return {k: v for k, v in prefetch.items() if v is None or isinstance(v, dict)}


def _orders(
    service: CdsService, context: Json, out: _Reader
) -> tuple[Json | None, tuple[str, ...] | None]:
    if service.hook not in (ORDER_SELECT, ORDER_SIGN):
        return None, None
    drafts = out.member(context, "draftOrders", "context", dict, required=True)
    if drafts is not None and drafts.get("resourceType") != "Bundle":
        out.problem(
            "structure",
            "context.draftOrders must be a FHIR Bundle",
            "context.draftOrders.resourceType",
        )
        drafts = None
    selections = None
    if service.hook == ORDER_SELECT:
        found = out.member(context, "selections", "context", list)
        if found is not None:
            bad = [i for i, s in enumerate(found) if not isinstance(s, str) or not s.strip()]
            for i in bad:
                out.problem(
                    "structure",
                    "each selection must be a reference string",
                    f"context.selections[{i}]",
                )
            selections = tuple(s for s in found if isinstance(s, str) and s.strip())
    return drafts, selections


def read_request(service: CdsService, body: object) -> HookRequest:
    """The hook request of ``body`` (parsed JSON) for ``service``.

    Raises:
        CdsError: 400, with every problem located.
    """
    if not isinstance(body, dict):
        raise CdsError.one(
            400, "structure", f"the body must be a JSON object, not {json_type(body)}", "$"
        )
    out = _Reader()
    hook = out.member(body, "hook", "", str, required=True)
    if hook is not None and hook != service.hook:
        out.problem("value", f"hook must be {service.hook!r} for this service", "hook")
    instance = out.member(body, "hookInstance", "", str, required=True)
    if instance is not None and not _is_uuid(instance):
        out.problem("value", "hookInstance must be a UUID", "hookInstance")
    access = _access(body, out)
    context = out.member(body, "context", "", dict, required=True) or {}
    patient_id = out.fhir_id(context, "patientId", "context", required=True)
    encounter_id = out.fhir_id(context, "encounterId", "context", required=False)
    user_id = out.member(context, "userId", "context", str)
    auth = body.get("fhirAuthorization")
    granted = auth.get("patient") if isinstance(auth, dict) else None
    if isinstance(granted, str) and patient_id and granted != patient_id:
        out.problem(
            "value",
            "fhirAuthorization.patient names another patient than context.patientId",
            "fhirAuthorization.patient",
        )
    prefetch = _prefetch(body, out)
    drafts, selections = _orders(service, context, out)
    if out.issues:
        raise CdsError(400, out.issues)
    assert hook is not None and instance is not None and patient_id is not None
    return HookRequest(
        hook=hook,
        hook_instance=instance,
        patient_id=patient_id,
        encounter_id=encounter_id,
        user_id=user_id,
        access=access,
        prefetch=prefetch,
        draft_orders=drafts,
        selections=selections,
    )
