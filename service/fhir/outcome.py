"""Located errors and the FHIR OperationOutcome that reports them.

An input the service cannot read is refused with every problem found, each located by a
FHIRPath ``expression`` (``Bundle.entry[3].resource.valueQuantity.code``), never with the first
one only and never with a stack trace. ``operation_outcome`` turns those problems into the R4
OperationOutcome the HTTP layer returns (FHIR R4 OperationOutcome: severity, issue-type code,
FHIRPath ``expression``).

Diagnostics say what is wrong with an element: its JSON type, a unit or code that was sent,
what would be accepted. They never quote a patient's value, name or identifier, so an error
can be logged as it is.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Literal

from service.exceptions import ServiceError
from service.intake.limits import condense

IssueSeverity = Literal["fatal", "error", "warning", "information"]

# The HL7 issue-type codes (http://hl7.org/fhir/issue-type) this service emits for input
# problems: the shape is wrong (structure), something needed is absent (required), a value or
# unit cannot be used (value), a code is not in its required code set (code-invalid), the input
# is valid FHIR the service does not handle (not-supported), it is larger than a budget
# (too-long), anything else invalid (invalid).
IssueType = Literal[
    "structure", "required", "value", "invalid", "code-invalid", "not-supported", "too-long"
]


@dataclass(frozen=True, slots=True)
class Problem:
    """One located problem with an input: an OperationOutcome issue in waiting."""

    severity: IssueSeverity
    code: IssueType
    diagnostics: str
    expression: str


class LocatedError(ServiceError):
    """An input that cannot be used, with every problem found in it (at least one)."""

    def __init__(self, problems: Sequence[Problem]) -> None:
        if not problems:
            raise ValueError("a LocatedError needs at least one problem")
        self.problems: tuple[Problem, ...] = tuple(problems)
        first = self.problems[0]
        more = len(self.problems) - 1
        suffix = f" (and {more} more)" if more else ""
        super().__init__(f"{first.expression}: {first.diagnostics}{suffix}")

    def __repr__(self) -> str:
        return f"{type(self).__name__}({list(self.problems)!r})"

    def operation_outcome(self) -> dict[str, object]:
        """The problems as an R4 OperationOutcome dict."""
        return operation_outcome(self.problems)


class BundleError(LocatedError):
    """A Bundle the service cannot read, for a reason the sender can fix (HTTP 422, exit 2)."""


class NotABundleError(BundleError):
    """The JSON body is not a FHIR Bundle at all (HTTP 400; a Bundle that cannot be
    assessed is a 422)."""


class TooLargeError(BundleError):
    """A Bundle over a budget of what one input may hold, e.g. its entries (HTTP 413)."""


class ConceptMapError(LocatedError):
    """A local-code ConceptMap that cannot be loaded (stops the service at start-up)."""


def error(code: IssueType, diagnostics: str, expression: str) -> Problem:
    """A Problem of severity ``error``, the usual kind."""
    return Problem("error", code, diagnostics, expression)


def condensed(problems: Sequence[Problem], limit: int) -> list[Problem]:
    """``problems`` as listed: repeats counted, at most ``limit`` (``service.intake.limits``)."""
    return condense(
        problems,
        kind=lambda p: (p.code, p.severity, p.diagnostics),
        severity=lambda p: p.severity,
        more=_more_problems,
        limit=limit,
    )


def _more_problems(first: Problem, count: int, same_kind: bool) -> Problem:
    if same_kind:
        text = f"and {count} more like the one above, not listed: {first.diagnostics}"
    else:
        text = f"and {count} more problems not listed (setting OXYRULE_MAX_ISSUES)"
    return Problem(first.severity, first.code, text, first.expression)


def operation_outcome(problems: Iterable[Problem]) -> dict[str, object]:
    """An R4 OperationOutcome (as a JSON-ready dict) with one issue per problem.

    Raises:
        ValueError: no problems were given (an OperationOutcome needs at least one issue).
    """
    issues: list[dict[str, object]] = []
    for p in problems:
        issue: dict[str, object] = {
            "severity": p.severity,
            "code": p.code,
            "diagnostics": p.diagnostics,
        }
        if p.expression:  # '': the input has no element to name (not JSON, not a resource)
            issue["expression"] = [p.expression]
        issues.append(issue)
    if not issues:
        raise ValueError("an OperationOutcome needs at least one issue")
    return {"resourceType": "OperationOutcome", "issue": issues}
