"""The little the service needs of the patient, from PID: birth date (PID-7), sex (PID-8).

V2-to-FHIR (segment PID to Patient): PID-7 -> ``Patient.birthDate`` (the time part goes to an
extension, unused here); PID-8 -> ``Patient.gender`` by table 0001 (F female, M male,
O/A/N other, U unknown). Names are never read; PID-3 is compared between PID segments, to
refuse a message that holds two patients, and its first identifier names the patient in the
FHIR result (``patient_address``: V2-to-FHIR maps PID-3 to ``Patient.identifier``), never in a
log.
"""

from __future__ import annotations

from collections.abc import Sequence

from service.hl7v2 import tables
from service.hl7v2.errors import ErrorCode
from service.hl7v2.message import Segment
from service.hl7v2.notes import Notes
from service.hl7v2.times import parse_birth_date
from service.intake.model import Patient, Severity


def read_patient(pids: Sequence[Segment], notes: Notes) -> Patient | None:
    """The patient of the message's PID segment(s), or None when it has none."""
    if not pids:
        return None
    first = pids[0]
    for other in pids[1:]:
        if other.raw(3) != first.raw(3):
            notes.problem(
                ErrorCode.SEGMENT_SEQUENCE,
                "this PID names another patient (PID-3 differs); send one patient's results "
                "per message",
                other.at(3),
            )
    birth_date = None
    born = first.value(7).strip()
    if born:
        try:
            birth_date, full = parse_birth_date(born)
        except ValueError as exc:
            notes.problem(ErrorCode.DATA_TYPE, str(exc), first.at(7))
        else:
            if not full:
                notes.issue(
                    "time-imprecise",
                    Severity.WARNING,
                    "birth date without a day: age is counted from the first day of the period",
                    first.at(7),
                )
    sex = first.value(8).strip()
    gender = tables.SEX_TO_GENDER.get(sex) if sex else None
    if sex and gender is None:
        message = "PID-8 is not an HL7 table 0001 sex code; sex is not used"
        notes.issue("field-ignored", Severity.INFORMATION, message, first.at(8))
    return Patient(reference=None, birth_date=birth_date, gender=gender)


def patient_address(pid: Segment, control_id: str) -> tuple[str, dict[str, object] | None]:
    """The key and the logical FHIR Reference of the message's patient: PID-3's first
    identifier (CX-1), its system an ``urn:oid:`` when the assigning authority (CX-4) is an ISO
    OID, else the authority's name as the assigner; None when PID-3 is empty."""
    value = pid.value(3, 1)
    if not value:
        return "", None
    identifier: dict[str, object] = {"value": value}
    authority, universal, kind = (pid.value(3, 4, s) for s in (1, 2, 3))
    if universal and kind == "ISO":
        identifier["system"] = f"urn:oid:{universal}"
    elif authority:
        identifier["assigner"] = {"display": authority}
    of = f" of message {control_id}" if control_id else ""
    reference: dict[str, object] = {
        "type": "Patient",
        "identifier": identifier,
        "display": f"HL7 v2 PID{of}",
    }
    return "Patient/pid-1", reference
