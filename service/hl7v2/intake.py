"""An ORU^R01 message as an ``Intake``: the entry point of the HL7 v2 adapter.

The message is walked once in segment order, following the ORU^R01 structure (HL7
v2.5.1 ch. 7): MSH, then patient (PID), then order groups, each an OBR followed by its OBX and SPM
segments (OBX after an SPM are that specimen's observations and are read all the same, as
V2-to-FHIR maps every OBX to an Observation). Other segments (NTE, ORC, PV1, TQ1, Z-segments
...) carry nothing the service reads and are passed over. Every OBX of every order group goes
into one intake, so several OBR groups and repeated gases are assessed as serial gases.

Result status (OBX-11) and corrections, decided once per message:

* F, C, A and P are used; every other table 0085 code is ignored and reported
  (``observation-ignored``), a code outside the table refuses the message;
* for the same observation (identified code, OBX-4 sub-id) at the same time, a corrected or
  amended result replaces a final or preliminary one, a final replaces a preliminary one, a
  later preliminary or correction replaces an earlier one of its kind; what was replaced is
  reported. Two *final* results that differ are refused (a final changes only by a
  correction), and a lower status after a higher one is ignored and reported.

As in the FHIR adapter, two kinds of trouble are kept apart: a message whose content cannot be
read (a missing required field, a number that is not one, a unit the quantity cannot take, an
OBX outside any order group) raises ``MessageInError`` with every problem located; a usable
message whose parts cannot all be used gives ``IntakeIssue``s and is assessed.
"""

from __future__ import annotations

from msgspec.structs import replace  # the intake records are msgspec Structs

from service.hl7v2 import tables
from service.hl7v2.errors import ErrorCode, Location, MessageInError, condensed_errors
from service.hl7v2.message import SEGMENT_ID, Segment, V2Message
from service.hl7v2.notes import Notes
from service.hl7v2.observations import Clock, ObservationReader, Order, Result
from service.hl7v2.patient import patient_address, read_patient
from service.hl7v2.specimen import order_specimen
from service.hl7v2.times import zone_of
from service.intake.limits import DEFAULT_READ_LIMITS, condensed_issues
from service.intake.model import Intake, IntakeIssue, Measurement, Severity
from service.terminology.local_codes import LocalCodeMap

_E = ErrorCode


def read_oru(
    message: V2Message,
    *,
    concept_map: LocalCodeMap | None = None,
    max_issues: int = DEFAULT_READ_LIMITS.max_issues,
) -> Intake:
    """Read an ORU^R01 into measurements in canonical units, with the issues met (repeats
    counted, at most ``max_issues`` listed: ``service.intake.limits``).

    The header (type, version, processing id) is checked by the caller (``header.unsupported``).

    Raises:
        MessageInError: content the sender must fix; every problem is located.
    """
    notes = Notes()
    clock = Clock(zone_of(message.header.time))
    pids, orders = _groups(message, notes, clock)
    patient = read_patient(pids, notes)
    reader = ObservationReader(clock, notes, concept_map)
    results: list[Result] = []
    for order in orders:
        order.specimen = order_specimen(order.obr, order.spms)
        results += [r for obx in order.obxs if (r := reader.read(obx, order)) is not None]
    kept, replaced = _settle(results, notes)
    measurements = [m for r in kept for m in r.measurements]
    issues = notes.issues + [i for r in kept for i in r.issues] + replaced
    if clock.assumed_utc:
        message_text = "times without an offset, and none in MSH-7: read as UTC"
        issues.append(IntakeIssue("time-zone-assumed", Severity.WARNING, message_text, "MSH[1]-7"))
    if notes.problems:
        raise MessageInError(condensed_errors(list(dict.fromkeys(notes.problems)), max_issues))
    intake = Intake(
        patient=patient, measurements=measurements, issues=condensed_issues(issues, max_issues)
    )
    intake.addresses = _addresses(message, measurements)
    if pids and patient is not None:
        reference, address = patient_address(pids[0], message.header.control_id)
        if address is not None:
            intake.patient = replace(patient, reference=reference)
            intake.addresses[reference] = address
    return intake


def _addresses(message: V2Message, measurements: list[Measurement]) -> dict[str, dict[str, object]]:
    """How the FHIR result points at each OBX read: no resource exists for it, so a logical
    reference naming the segment (and the message, by its control id)."""
    control = message.header.control_id
    of = f" of message {control}" if control else ""
    found: dict[str, dict[str, object]] = {}
    for m in measurements:
        where = m.source.expression.split("-", 1)[0]  # OBX[7]-5 -> OBX[7]
        found.setdefault(
            m.source.reference,
            {"type": "Observation", "display": f"HL7 v2 {where}{of}"},
        )
    return found


def _groups(message: V2Message, notes: Notes, clock: Clock) -> tuple[list[Segment], list[Order]]:
    """The PID segments and the order groups, checking the segment order on the way."""
    pids: list[Segment] = []
    orders: list[Order] = []
    for position, segment in enumerate(message.segments[1:], start=2):
        name = segment.name
        if not SEGMENT_ID.fullmatch(name):
            reason = f"segment {position} has no segment id (three capitals or digits)"
            notes.problem(_E.SEGMENT_SEQUENCE, reason, Location("MSH", 1))
        elif name == "MSH":
            reason = "a second MSH: send one message per request (batches are not supported)"
            notes.problem(_E.SEGMENT_SEQUENCE, reason, segment.at())
        elif name == "PID":
            pids.append(segment)
        elif name == "OBR":
            order = Order(segment)
            when = segment.value(7).strip()
            if when:
                order.time = clock.read(when, segment.at(7), notes)
            orders.append(order)
        elif name in ("OBX", "SPM"):
            if not orders:
                reason = f"{name} before any OBR: results belong to an order group (ORU^R01)"
                notes.problem(_E.SEGMENT_SEQUENCE, reason, segment.at())
            elif name == "OBX":
                orders[-1].obxs.append(segment)
            else:
                orders[-1].spms.append(segment)
    if not orders and not notes.problems:
        reason = "no OBR: an ORU^R01 holds at least one order group"
        notes.problem(_E.SEGMENT_SEQUENCE, reason, Location("OBR", 1))
    return pids, orders


def _replaced(old: Result, new: Result) -> IntakeIssue:
    old_name, new_name = tables.STATUS_NAMES[old.status], tables.STATUS_NAMES[new.status]
    message = f"{old_name} result replaced by the {new_name} one in {new.obx.at()}"
    return IntakeIssue("observation-ignored", Severity.INFORMATION, message, str(old.obx.at(11)))


def _not_used(new: Result, old: Result, why: str) -> IntakeIssue:
    message = f"{why} {old.obx.at()} for the same observation and time; not used"
    return IntakeIssue("observation-ignored", Severity.INFORMATION, message, str(new.obx.at(11)))


def _settle(results: list[Result], notes: Notes) -> tuple[list[Result], list[IntakeIssue]]:
    """Apply corrections: one result per (code, sub-id, time); what lost, and why."""
    standing: dict[object, Result] = {}
    said: list[IntakeIssue] = []
    for new in results:
        old = standing.get(new.key)
        if old is None:
            standing[new.key] = new
        elif new.sent == old.sent and new.rank <= old.rank:
            said.append(_not_used(new, old, "repeats"))
        elif new.rank > old.rank or (new.rank == old.rank and new.status != "F"):
            said.append(_replaced(old, new))
            standing[new.key] = new
        elif new.rank < old.rank:
            status = tables.STATUS_NAMES[new.status]
            said.append(_not_used(new, old, f"a {status} result after a higher status in"))
        else:
            reason = (
                f"a second final result for the same observation and time as {old.obx.at()}, "
                "with another value: a final result changes only as corrected (C)"
            )
            notes.problem(_E.DUPLICATE_KEY, reason, new.obx.at(11))
    kept = set(map(id, standing.values()))
    return [r for r in results if id(r) in kept], said
