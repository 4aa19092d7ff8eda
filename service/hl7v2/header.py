"""Whether a message is one this service takes: ORU^R01, a known version and processing id.

A message that fails here is answered AR (HL7 table 0008: rejected for its type, event,
version or processing id; HL7 v2.5.1 chapter 2) with ERR codes 200-203 of table 0357.
"""

from __future__ import annotations

from service.hl7v2 import tables
from service.hl7v2.errors import ErrorCode, Location, V2Error
from service.hl7v2.message import Header

_E = ErrorCode


def version_tuple(version: str) -> tuple[int, ...]:
    """``"2.5.1"`` as (2, 5, 1); anything unreadable as (0,)."""
    try:
        return tuple(int(p) for p in version.split("."))
    except ValueError:
        return (0,)


def unsupported(header: Header) -> list[V2Error]:
    """What in MSH makes the message one this service does not take (empty when none)."""
    errors: list[V2Error] = []

    def refuse(code: ErrorCode, reason: str, field: int, component: int | None = None) -> None:
        errors.append(V2Error(Location("MSH", 1, field, component), code, reason))

    # What was sent is not quoted (an error names the field, never what it holds).
    if header.message_code != "ORU":
        what = "the message type is empty" if not header.message_code else "not ORU"
        refuse(_E.UNSUPPORTED_MESSAGE_TYPE, f"only ORU^R01 is taken ({what})", 9, 1)
    elif header.trigger != "R01":
        what = "the trigger event is empty" if not header.trigger else "not R01"
        refuse(_E.UNSUPPORTED_EVENT, f"only ORU^R01 is taken ({what})", 9, 2)
    elif header.structure not in ("", "ORU_R01"):
        refuse(_E.UNSUPPORTED_MESSAGE_TYPE, "the message structure must be ORU_R01", 9, 3)
    if header.processing_id not in tables.PROCESSING_IDS:
        reason = "the processing id must be P, T or D (HL7 table 0103)"
        refuse(_E.UNSUPPORTED_PROCESSING_ID, reason, 11)
    if header.version not in tables.SUPPORTED_VERSIONS:
        accepted = ", ".join(sorted(tables.SUPPORTED_VERSIONS, key=version_tuple))
        refuse(_E.UNSUPPORTED_VERSION, f"version id must be one of {accepted}", 12)
    if not header.control_id:
        refuse(_E.REQUIRED_FIELD_MISSING, "MSH-10 (message control id) is required", 10)
    return errors
