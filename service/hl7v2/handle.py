"""One HL7 v2 message in, one answer out: the function every v2 surface calls.

``handle_v2(text, runtime, reply=...)`` parses, checks and reads the message, assesses it with
the same ``Runtime`` as the FHIR path and answers in the form asked for:

======== ====================================== ======================================
reply    assessed (MSA-1 AA)                    refused (AE / AR)
======== ====================================== ======================================
ack      200, the ACK (warnings as ERR W)       422 AE / 400 AR, the ACK with ERR
fhir     200, the FHIR result Bundle            422 / 400, an OperationOutcome
result   200, an ORU^R01 carrying the result    422 / 400, the ACK with ERR
======== ====================================== ======================================

AA is given only after the assessment has run to its end. Nothing escapes: trouble of our own
is answered AR with ERR code 207 and status 500, and logged without the message's content
(no identifier or value is ever logged here). The statuses mirror the FHIR route's (422 a
message the sender can fix, 400 one that is not an acceptable message at all).
"""

from __future__ import annotations

import logging
import time
import traceback
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Literal

import orjson

from service.assess.presentation import PressureUnit
from service.assess.result import Assessment
from service.hl7v2.ack import AckCode, ack
from service.hl7v2.errors import (
    ErrorCode,
    Location,
    MessageInError,
    MessageRejected,
    V2Error,
    operation_outcome,
)
from service.hl7v2.header import unsupported
from service.hl7v2.intake import read_oru
from service.hl7v2.message import (
    DEFAULT_LIMITS,
    Header,
    V2Limits,
    V2Message,
    parse_message,
    read_header,
    v2_text,
)
from service.hl7v2.result import oru_result
from service.intake.model import Intake, Severity
from service.runtime import Runtime

Reply = Literal["ack", "fhir", "result"]
ER7_MEDIA_TYPE = "application/hl7-v2; charset=utf-8"
FHIR_MEDIA_TYPE = "application/fhir+json"
STATUS = {"AA": 200, "AE": 422, "AR": 400}

log = logging.getLogger("oxyrule.hl7v2")


@dataclass(frozen=True, slots=True)
class V2Response:
    """What to send back: HTTP-style status, media type, body, and the MSA-1 it stands for."""

    status: int
    media_type: str
    body: bytes
    ack_code: AckCode


def notices(intake: Intake) -> list[V2Error]:
    """The intake's warnings and errors as ERR notices for an AA (information stays out)."""
    return [
        V2Error(
            Location.parse(issue.expression),
            ErrorCode.ACCEPTED,
            issue.message,
            "W",
            issue.code,
        )
        for issue in intake.issues
        if issue.severity is not Severity.INFORMATION
    ]


def outcome_text(a: Assessment) -> str:
    """The outcome in a few words, for MSA-3: the pattern and the likely mechanisms."""
    likely = [m.code for m in a.mechanisms if m.grade == "likely"]
    return f"assessed: {a.pattern}" + ("; likely " + ", ".join(likely) if likely else "")


def refusal(
    message: V2Message | Header | None,
    code: AckCode,
    errors: Sequence[V2Error],
    reply: Reply,
    *,
    status: int | None = None,
    now: datetime | None = None,
) -> V2Response:
    """The answer to a message that was not assessed."""
    status = status or STATUS[code]
    if reply == "fhir":
        return V2Response(status, FHIR_MEDIA_TYPE, orjson.dumps(operation_outcome(errors)), code)
    what = "rejected" if code == "AR" else "not assessed"
    count = len(errors)
    text = f"{what}: {count} problem{'' if count == 1 else 's'}, see ERR"
    body = ack(message, code, errors, text=text, now=now)
    return V2Response(status, ER7_MEDIA_TYPE, body.encode(), code)


def _answer(
    text: str,
    runtime: Runtime,
    reply: Reply,
    unit: PressureUnit | None,
    now: datetime | None,
    limits: V2Limits,
) -> V2Response:
    try:
        message = parse_message(text, limits)
    except MessageRejected as exc:
        return refusal(read_header(text), "AR", exc.errors, reply, now=now)
    problems = unsupported(message.header)
    if problems:
        return refusal(message, "AR", problems, reply, now=now)
    try:
        intake = read_oru(message, concept_map=runtime.concept_map, max_issues=limits.max_issues)
    except MessageInError as exc:
        return refusal(message, "AE", exc.errors, reply, now=now)
    assessment = runtime.assess_intake(intake, now=now, pressure_unit=unit)
    if reply == "fhir":
        bundle = runtime.render(assessment, pressure_unit=unit, addresses=intake.addresses)
        body = orjson.dumps(bundle)
        return V2Response(200, FHIR_MEDIA_TYPE, body, "AA")
    if reply == "result":
        unit = unit or runtime.settings.pressure_unit
        result = oru_result(
            message, assessment, settings=runtime.settings, pressure_unit=unit, now=now
        )
        return V2Response(200, ER7_MEDIA_TYPE, result.encode(), "AA")
    answer = ack(message, "AA", notices(intake), text=outcome_text(assessment), now=now)
    return V2Response(200, ER7_MEDIA_TYPE, answer.encode(), "AA")


def handle_v2(
    text: str,
    runtime: Runtime,
    *,
    reply: Reply = "ack",
    pressure_unit: PressureUnit | None = None,
    now: datetime | None = None,
    limits: V2Limits = DEFAULT_LIMITS,
) -> V2Response:
    """Assess one HL7 v2 message (ER7 text) and answer it; never raises.

    Args:
        text: the message, segments separated by CR (LF and CRLF are accepted).
        runtime: the loaded service.
        reply: ``ack`` (an ACK), ``fhir`` (the FHIR result Bundle) or ``result`` (an ORU^R01).
        pressure_unit: pressures of the result (default: the runtime's setting).
        now: the clock, for reproducible answers in tests.
        limits: how large a message is parsed at all (``V2Limits``); beyond, AR.
    """
    started = time.perf_counter()
    try:
        response = _answer(text, runtime, reply, pressure_unit, now, limits)
    except Exception as exc:  # the last line of defence: answered, never raised
        frames = "".join(traceback.format_tb(exc.__traceback__))
        # The exception's own message may quote the input: only its type and frames are logged.
        log.error("HL7 v2 message failed with %s\n%s", type(exc).__name__, frames)
        error = V2Error(
            None, ErrorCode.INTERNAL, "the message could not be processed; send it again later"
        )
        response = refusal(read_header(text), "AR", [error], reply, status=500, now=now)
    if reply == "ack":
        response = enhanced_mode(read_header(text), response, now=now)
    elapsed = (time.perf_counter() - started) * 1000
    log.info("HL7 v2 message answered %s in %.1f ms", response.ack_code, elapsed)
    return response


def _wanted(condition: str, error: bool) -> bool:
    """Whether HL7 table 0155 asks for an acknowledgment in this case (empty: always)."""
    return {"AL": True, "NE": False, "ER": error, "SU": not error}.get(condition, True)


def enhanced_mode(
    header: Header | None, response: V2Response, *, now: datetime | None = None
) -> V2Response:
    """The acknowledgment HL7's enhanced mode asks for (v2.5.1 ch. 2, MSH-15 and MSH-16).

    Original mode (both empty): the application ACK, as made. Enhanced mode: the application
    ACK (AA/AE/AR) when MSH-16 asks for one in this case; else the accept (commit) ACK when
    MSH-15 asks for one: CA, or CR when the message was rejected (AR); else nothing at all
    (status 204, an empty body: MLLP sends no frame). The service commits and applies a
    message in one step, so one answer carries both: the application ACK when it is asked for.
    """
    if header is None or not (header.accept_ack or header.application_ack):
        return response
    code = response.ack_code
    if _wanted(header.application_ack, error=code != "AA"):
        return response
    if _wanted(header.accept_ack, error=code == "AR"):
        commit: AckCode = "CR" if code == "AR" else "CA"
        body = ack(header, commit, text="received" if commit == "CA" else "rejected", now=now)
        return V2Response(200 if commit == "CA" else 400, ER7_MEDIA_TYPE, body.encode(), commit)
    return V2Response(204, ER7_MEDIA_TYPE, b"", code)


def answer_v2(
    runtime: Runtime, raw: bytes, unit: PressureUnit | None = None
) -> tuple[bytes, bool] | None:
    """For ``oxyrule assess``: (FHIR result or OperationOutcome JSON, whether the input was
    refused) when ``raw`` is an HL7 v2 message, else None (so the caller reads a Bundle)."""
    text = v2_text(raw)
    if text is None:
        return None
    response = handle_v2(text, runtime, reply="fhir", pressure_unit=unit)
    return response.body, response.ack_code != "AA"
