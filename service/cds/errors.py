"""A CDS Hooks call refused: its HTTP status and the located issues that explain it."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from service.exceptions import ServiceError


@dataclass(frozen=True, slots=True)
class Issue:
    """One OperationOutcome issue: an HL7 issue-type code, what is wrong, and where.

    ``expression`` is a path into the hook request (``context.patientId``,
    ``prefetch.bloodGases.entry[3].resource.subject``) or ``http.`` and a header name.
    Diagnostics never quote a patient's value, name or identifier, nor a token.
    """

    code: str
    diagnostics: str
    expression: str | None = None


class CdsError(ServiceError):
    """A refusal: status, issues (at least one) and extra response headers."""

    def __init__(
        self, status: int, issues: Sequence[Issue], headers: Mapping[str, str] | None = None
    ) -> None:
        if not issues:
            raise ValueError("a CdsError needs at least one issue")
        self.status = status
        self.issues: tuple[Issue, ...] = tuple(issues)
        self.headers: dict[str, str] = dict(headers or {})
        super().__init__(f"{status}: {self.issues[0].diagnostics}")

    @classmethod
    def one(
        cls,
        status: int,
        code: str,
        diagnostics: str,
        expression: str | None = None,
        headers: Mapping[str, str] | None = None,
    ) -> CdsError:
        return cls(status, [Issue(code, diagnostics, expression)], dict(headers or {}))

    def operation_outcome(self) -> dict[str, object]:
        """The issues as an R4 OperationOutcome (the body CDS Hooks recommends for errors)."""
        issues: list[dict[str, object]] = []
        for issue in self.issues:
            item: dict[str, object] = {
                "severity": "error",
                "code": issue.code,
                "diagnostics": issue.diagnostics,
            }
            if issue.expression is not None:
                item["expression"] = [issue.expression]
            issues.append(item)
        return {"resourceType": "OperationOutcome", "issue": issues}


class CdsConfigError(ServiceError, ValueError):
    """CDS settings that cannot be used (a JWK Set that is not one); names the setting."""
