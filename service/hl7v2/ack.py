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

AckCode = Literal["AA", "AE", "AR"]
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
        er7.components(*(header.receiving_application or (tables.APPLICATION,))),
        er7.components(*header.receiving_facility),
        er7.components(*header.sending_application),
        er7.components(*header.sending_facility),
        format_dtm(now or datetime.now(UTC)),
        "",
        er7.components(*message_type),
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
    """One ERR segment for ``version`` (ERR-1 too when the version predates ERR-2)."""
    code = er7.components(str(int(error.code)), error.code.text, "HL70357")
    erl = er7.components(*error.location.erl()) if error.location is not None else ""
    eld = ""
    if version_tuple(version) < (2, 5) and error.location is not None:
        segment_id, sequence, *rest = error.location.erl()
        coded = er7.subcomponents(str(int(error.code)), error.code.text, "HL70357")
        eld = "^".join((segment_id, sequence, rest[0] if rest else "", coded))
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
    segments = [msh, er7.segment("MSA", code, er7.escape(header.control_id), msa_text)]
    if text and not old_text:
        errors = [*errors, V2Error(None, ErrorCode.ACCEPTED, text, "I")]
    segments += [err_segment(e, version) for e in errors]
    return er7.message(segments)
