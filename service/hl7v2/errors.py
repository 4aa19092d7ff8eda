"""Located problems with an HL7 v2 message, and the two ways a message is refused.

A problem names where it is (segment, its occurrence in the message, field, component: the
v2 ERL of ERR-2), an HL7 table 0357 error code and a reason that never quotes a patient's
value or identifier, so it can be logged and sent back as it is::

    V2MessageError (ServiceError)
    ├── MessageRejected      MSA-1 AR: not a message we can take at all (no usable MSH, an
    │                        unsupported type, event, version or processing id, a broken
    │                        frame, or trouble of our own)
    └── MessageInError       MSA-1 AE: an ORU^R01 whose content the sender must fix

``operation_outcome`` turns the same problems into the FHIR OperationOutcome that the HTTP
layer returns when ``application/fhir+json`` is asked for.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from enum import IntEnum
from typing import Literal

from service.exceptions import ServiceError
from service.intake.limits import condense

ErrSeverity = Literal["E", "W", "I"]  # HL7 table 0516


class ErrorCode(IntEnum):
    """HL7 table 0357, message error condition codes (ERR-3)."""

    ACCEPTED = 0
    SEGMENT_SEQUENCE = 100
    REQUIRED_FIELD_MISSING = 101
    DATA_TYPE = 102
    TABLE_VALUE_NOT_FOUND = 103
    VALUE_TOO_LONG = 104
    UNSUPPORTED_MESSAGE_TYPE = 200
    UNSUPPORTED_EVENT = 201
    UNSUPPORTED_PROCESSING_ID = 202
    UNSUPPORTED_VERSION = 203
    DUPLICATE_KEY = 205
    INTERNAL = 207

    @property
    def text(self) -> str:
        """The table's display text for the code (ERR-3.2)."""
        return _CODE_TEXT[self]


_CODE_TEXT = {
    ErrorCode.ACCEPTED: "Message accepted",
    ErrorCode.SEGMENT_SEQUENCE: "Segment sequence error",
    ErrorCode.REQUIRED_FIELD_MISSING: "Required field missing",
    ErrorCode.DATA_TYPE: "Data type error",
    ErrorCode.TABLE_VALUE_NOT_FOUND: "Table value not found",
    ErrorCode.VALUE_TOO_LONG: "Value too long",
    ErrorCode.UNSUPPORTED_MESSAGE_TYPE: "Unsupported message type",
    ErrorCode.UNSUPPORTED_EVENT: "Unsupported event code",
    ErrorCode.UNSUPPORTED_PROCESSING_ID: "Unsupported processing id",
    ErrorCode.UNSUPPORTED_VERSION: "Unsupported version id",
    ErrorCode.DUPLICATE_KEY: "Duplicate key identifier",
    ErrorCode.INTERNAL: "Application internal error",
}

# The FHIR issue type that says the same thing as each 0357 code (OperationOutcome.issue.code).
_ISSUE_TYPE: dict[ErrorCode, str] = {
    ErrorCode.SEGMENT_SEQUENCE: "structure",
    ErrorCode.REQUIRED_FIELD_MISSING: "required",
    ErrorCode.DATA_TYPE: "value",
    ErrorCode.TABLE_VALUE_NOT_FOUND: "code-invalid",
    ErrorCode.VALUE_TOO_LONG: "value",
    ErrorCode.UNSUPPORTED_MESSAGE_TYPE: "not-supported",
    ErrorCode.UNSUPPORTED_EVENT: "not-supported",
    ErrorCode.UNSUPPORTED_PROCESSING_ID: "not-supported",
    ErrorCode.UNSUPPORTED_VERSION: "not-supported",
    ErrorCode.DUPLICATE_KEY: "duplicate",
    ErrorCode.INTERNAL: "exception",
}
_LOCATION = re.compile(r"([A-Z][A-Z0-9]{2})\[(\d+)\](?:-(\d+)(?:\.(\d+))?)?")
_ISSUE_SEVERITY = {"E": "error", "W": "warning", "I": "information"}


@dataclass(frozen=True, slots=True)
class Location:
    """Where in a message: ``OBX[3]-5.2`` is component 2 of field 5 of the third OBX.

    ``sequence`` counts the segment's occurrences in the whole message, from 1 (ERL.2).
    """

    segment: str
    sequence: int = 1
    field: int | None = None
    component: int | None = None

    def __str__(self) -> str:
        text = f"{self.segment}[{self.sequence}]"
        if self.field is not None:
            text += f"-{self.field}"
            if self.component is not None:
                text += f".{self.component}"
        return text

    @classmethod
    def parse(cls, text: str) -> Location | None:
        """The Location written by ``str()`` (``OBX[3]-5.2``), or None for anything else."""
        match = _LOCATION.fullmatch(text)
        if match is None:
            return None
        segment, sequence, field, component = match.groups()
        return cls(
            segment,
            int(sequence),
            int(field) if field else None,
            int(component) if component else None,
        )

    def erl(self) -> tuple[str, ...]:
        """The ERL components (segment, sequence, field, repetition, component)."""
        parts = [self.segment, str(self.sequence)]
        if self.field is not None:
            parts.append(str(self.field))
            if self.component is not None:
                parts += ["1", str(self.component)]
        return tuple(parts)


@dataclass(frozen=True, slots=True)
class V2Error:
    """One problem (severity E) or notice (W, I) about a message, for an ERR segment.

    ``finding`` is the intake finding code of a notice (ERR-5), e.g. ``observation-ignored``.
    """

    location: Location | None
    code: ErrorCode
    reason: str
    severity: ErrSeverity = "E"
    finding: str | None = None

    def __str__(self) -> str:
        where = f"{self.location}: " if self.location is not None else ""
        return f"{where}{self.reason}"


class V2MessageError(ServiceError):
    """A message that cannot be assessed, with every problem found (at least one)."""

    def __init__(self, errors: Sequence[V2Error]) -> None:
        if not errors:
            raise ValueError(f"a {type(self).__name__} needs at least one problem")
        self.errors: tuple[V2Error, ...] = tuple(errors)
        more = len(self.errors) - 1
        super().__init__(str(self.errors[0]) + (f" (and {more} more)" if more else ""))

    def __repr__(self) -> str:
        return f"{type(self).__name__}({list(self.errors)!r})"


class MessageRejected(V2MessageError):
    """Answered AR: the message cannot be taken at all (header, type, version, framing)."""


class MessageInError(V2MessageError):
    """Answered AE: an ORU^R01 whose content the sender must fix."""


def condensed_errors(errors: Sequence[V2Error], limit: int) -> list[V2Error]:
    """``errors`` as listed: repeats counted, at most ``limit`` (``service.intake.limits``)."""
    return condense(
        errors,
        kind=lambda e: (e.code, e.severity, e.reason),
        severity=lambda e: _ISSUE_SEVERITY[e.severity],
        more=_more_errors,
        limit=limit,
    )


def _more_errors(first: V2Error, count: int, same_kind: bool) -> V2Error:
    if same_kind:
        reason = f"and {count} more like the one above, not listed: {first.reason}"
    else:
        reason = f"and {count} more problems not listed (setting OXYRULE_MAX_ISSUES)"
    return V2Error(first.location, first.code, reason, first.severity, first.finding)


def operation_outcome(errors: Sequence[V2Error]) -> dict[str, object]:
    """The errors as an R4 OperationOutcome. The v2 location (``OBX[1]-5``) goes to
    ``issue.location``: ``expression`` is FHIRPath, which has nothing to select in ER7."""
    issues: list[dict[str, object]] = []
    for e in errors:
        issue: dict[str, object] = {
            "severity": _ISSUE_SEVERITY[e.severity],
            "code": _ISSUE_TYPE.get(e.code, "invalid"),
            "diagnostics": f"HL7 v2 error {int(e.code)} ({e.code.text}): {e.reason}",
        }
        if e.location is not None:
            issue["location"] = [str(e.location)]
        issues.append(issue)
    if not issues:
        raise ValueError("an OperationOutcome needs at least one issue")
    return {"resourceType": "OperationOutcome", "issue": issues}
