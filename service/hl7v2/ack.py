"""The ACK that answers a message (HL7 v2.5.1 chapter 2, original mode).

``MSH`` with sender and receiver swapped (MSH-3/4 <- MSH-5/6 and back), MSH-9
``ACK^<trigger>^ACK``, a new MSH-10; ``MSA`` with MSA-1 AA (accepted: assessed), AE (error:
content the sender must fix) or AR (rejected: type, version, processing id, framing, or our
own failure) and MSA-2 = the MSH-10 acknowledged; one ``ERR`` per problem or notice, naming
the segment, its occurrence, the field and component (ERR-2, ERL), the table 0357 code
(ERR-3), the severity E/W/I (ERR-4), our finding code for notices (ERR-5) and the reason
(ERR-8). For versions before 2.5, which know only ERR-1, ERR-1 is filled as well; MSA-3
(withdrawn in 2.7) carries the outcome text for versions before 2.7, an informational ERR
carries it from 2.7 on. Pure: the clock and the control id may be given.
"""

from __future__ import annotations

import re
import uuid
from collections.abc import Sequence
from datetime import UTC, datetime
from typing import Literal

from service.hl7v2 import er7, tables
from service.hl7v2.errors import ErrorCode, V2Error
from service.hl7v2.header import version_tuple
from service.hl7v2.message import Header, V2Message
from service.hl7v2.times import format_dtm

AckCode = Literal["AA", "AE", "AR", "CA", "CR"]
TRIGGER_SHAPE = re.compile(r"[A-Z][A-Z0-9]{2}")
MSA_TEXT_LIMIT = 80  # MSA-3 is ST(80)


def new_control_id() -> str:
    """A fresh message control id (20 characters: MSH-10 is ST(20) in v2.5.1)."""
    return uuid.uuid4().hex[:20]


def reply_header(
    message: V2Message | Header | None,
    message_type: tuple[str, str, str],
    *,
    now: datetime | None = None,
    control_id: str | None = None,
) -> tuple[str, str]:
    """(MSH segment, version) of a reply to ``message``: sender and receiver swapped."""
    header = message.header if isinstance(message, V2Message) else (message or Header())
    version = header.version if header.version in tables.SUPPORTED_VERSIONS else None
    version = version or tables.DEFAULT_VERSION
    processing = header.processing_id if header.processing_id in tables.PROCESSING_IDS else "P"
    segment = er7.msh(
        # Already encoded (``Header.of``): echoed with their components and sub-components.
        "^".join(header.receiving_application or (er7.escape(tables.APPLICATION),)),
        "^".join(header.receiving_facility),
        "^".join(header.sending_application),
        "^".join(header.sending_facility),
        format_dtm(now or datetime.now(UTC)),
        "",
        # MSH-9 has the message structure (third component) from v2.3.1 on.
        er7.components(*message_type[: 3 if version_tuple(version) >= (2, 3, 1) else 2]),
        er7.escape(control_id or new_control_id()),
        processing,
        version,
        "",
        "",
        "",
        "",
        "",
        "UNICODE UTF-8",  # MSH-18: the replies may carry ×, −, ≤ from rationales
    )
    return segment, version


def err_segment(error: V2Error, version: str) -> str:
    """One ERR segment for ``version``: before v2.5 ERR has one field, ERR-1 (ELD: segment,
    sequence, field, coded error); from v2.5 the location (ERR-2), code (ERR-3), severity
    (ERR-4), our finding code (ERR-5) and the reason (ERR-8)."""
    if version_tuple(version) < (2, 5):
        coded = er7.subcomponents(str(int(error.code)), error.code.text, "HL70357")
        segment_id, sequence, field = "", "", ""
        if error.location is not None:
            segment_id, sequence, *rest = error.location.erl()
            field = rest[0] if rest else ""
        return er7.segment("ERR", "^".join((segment_id, sequence, field, coded)))
    code = er7.components(str(int(error.code)), error.code.text, "HL70357")
    erl = er7.components(*error.location.erl()) if error.location is not None else ""
    eld = ""
    finding = er7.components(error.finding, "", tables.FINDING_SYSTEM) if error.finding else ""
    reason = er7.escape(error.reason)
    return er7.segment("ERR", eld, erl, code, error.severity, finding, "", "", reason)


def ack(
    message: V2Message | Header | None,
    code: AckCode,
    errors: Sequence[V2Error] = (),
    *,
    text: str | None = None,
    now: datetime | None = None,
    control_id: str | None = None,
) -> str:
    """The ACK answering ``message`` (parsed, or only its header, or None if unreadable).

    ``errors`` become ERR segments; ``text`` is the outcome in words (MSA-3 before v2.7,
    an informational ERR from v2.7 on).
    """
    header = message.header if isinstance(message, V2Message) else (message or Header())
    # MSH-9.2 echoes the trigger event acknowledged when it has a trigger's shape (table 0003:
    # a letter and two letters or digits); anything else sent there is not repeated back.
    trigger = header.trigger if TRIGGER_SHAPE.fullmatch(header.trigger) else ""
    msh, version = reply_header(header, ("ACK", trigger, "ACK"), now=now, control_id=control_id)
    old_text = version_tuple(version) < (2, 7)
    msa_text = er7.escape(text[:MSA_TEXT_LIMIT]) if text and old_text else ""
    # MSA-2 is required: with no MSH-10 to echo, HL7's explicit null ("").
    acknowledged = er7.escape(header.control_id) if header.control_id else '""'
    segments = [msh, er7.segment("MSA", code, acknowledged, msa_text)]
    if text and not old_text and code in ("AA", "CA"):
        # From v2.7 the outcome in words is an informational ERR, code 0 "Message accepted":
        # only true of an accepted message (a refusal's ERRs say what is wrong).
        errors = [*errors, V2Error(None, ErrorCode.ACCEPTED, text, "I")]
    segments += [err_segment(e, version) for e in errors]
    return er7.message(segments)
