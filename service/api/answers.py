"""From request bytes to answer bytes: the CPU-bound part of a request, run in a work thread.

Each function here takes bytes and returns bytes with what the metrics and the log need
(``Answered``), touches nothing shared but the read-only runtime, and never raises for
anything a client sends, so the HTTP layer can run it off the event loop
(``service.work``) and do the counting on the loop.
"""

from __future__ import annotations

from dataclasses import dataclass

import orjson

from service.api.body import Line
from service.api.deps import UNITS
from service.api.errors import outcome
from service.api.tally import Tally, tally, tally_json
from service.assess.presentation import PressureUnit
from service.batch import answer
from service.fhir import json_body
from service.fhir.operation import OperationInput, operation_input
from service.fhir.outcome import BundleError, NotABundleError, TooLargeError, error
from service.hl7v2.handle import Reply, V2Response, handle_v2
from service.hl7v2.message import V2Limits, v2_text
from service.intake.limits import ReadLimits
from service.runtime import Runtime


@dataclass(frozen=True, slots=True)
class Answered:
    """An answer made: its HTTP status, its bytes, and what it says in counts."""

    status: int
    body: bytes
    tally: Tally


def _status(exc: BundleError) -> int:
    if isinstance(exc, NotABundleError):
        return 400
    return 413 if isinstance(exc, TooLargeError) else 422


def _units(sent: OperationInput, unit: PressureUnit | None) -> PressureUnit | None:
    """The pressure unit: the URL's ``units``, or the body's; both must agree.

    Raises:
        BundleError: the body's ``units`` is not a unit offered, or disagrees with the URL's.
    """
    if sent.units is None or sent.units_at is None:
        return unit
    body_unit = UNITS.get(sent.units)
    if body_unit is None:
        message = f"units must be one of {', '.join(UNITS)}"
        raise BundleError([error("code-invalid", message, sent.units_at)])
    if unit is not None and unit != body_unit:
        message = "units differs from the units URL parameter; send one"
        raise BundleError([error("invalid", message, sent.units_at)])
    return body_unit


def answer_bundle(
    runtime: Runtime, raw: bytes | bytearray, unit: PressureUnit | None, limits: ReadLimits
) -> Answered:
    """One body (a Bundle, or a Parameters holding it): the result (200) or the
    OperationOutcome that refuses it."""
    try:
        sent = operation_input(json_body.loads(raw))
        unit = _units(sent, unit)
    except orjson.JSONDecodeError as exc:
        body = outcome("structure", f"the body is not JSON ({exc.msg})")
        return Answered(400, orjson.dumps(body), Tally(None, rejected_code="structure"))
    except BundleError as exc:
        return Answered(
            _status(exc),
            orjson.dumps(exc.operation_outcome()),
            Tally(None, rejected_code=exc.problems[0].code),
        )
    try:
        result = runtime.assess_bundle(
            sent.bundle, pressure_unit=unit, limits=limits, root=sent.root
        )
    except BundleError as exc:
        refusal = Tally(None, rejected_code=exc.problems[0].code)
        return Answered(_status(exc), orjson.dumps(exc.operation_outcome()), refusal)
    return Answered(200, orjson.dumps(result), tally(result))


def answer_line(
    runtime: Runtime, line: Line, unit: PressureUnit | None, limits: ReadLimits, max_bytes: int
) -> Answered:
    """One NDJSON line: its result, or an OperationOutcome naming the line (status 200: the
    stream answers every line)."""
    where = f"line {line.number}"
    if line.data is None:
        body = outcome(
            "too-long",
            f"{where}: longer than the limit of {max_bytes} bytes per line "
            "(setting OXYRULE_MAX_BODY_BYTES)",
        )
        return Answered(200, orjson.dumps(body), Tally(None, rejected_code="too-long"))
    text, _ = answer(runtime, line.data, where, unit, limits)
    return Answered(200, text, tally_json(text))


def answer_v2(
    runtime: Runtime,
    raw: bytes | bytearray,
    reply: Reply,
    unit: PressureUnit | None,
    limits: V2Limits,
) -> V2Response:
    """One HL7 v2 message (bytes as sent: decoded here in the character set MSH-18 names,
    UTF-8 otherwise, bytes that do not decode replaced), as the CLI and MLLP decode it."""
    text = v2_text(bytes(raw)) or raw.decode("utf-8", errors="replace")
    return handle_v2(text, runtime, reply=reply, pressure_unit=unit, limits=limits)
