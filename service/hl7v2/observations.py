"""One OBX as intake measurements: status, code, time, value, specimen (HL7 V2-to-FHIR IG).

V2-to-FHIR maps each OBX to an Observation: OBX-3 -> ``code`` (CWE components 1-3 the first
coding, 4-6 the alternate, coding system through table 0396), OBX-11 -> ``status``, OBX-14 ->
``effectiveDateTime`` (OBR-7 when OBX-14 is empty), OBX-2/5/6 -> ``value[x]`` (``values.py``),
and the order group's SPM -> ``specimen``. From there the reading follows the FHIR adapter
rule for rule: the same code table, the same local-code ConceptMap, the same "2708-6 beside a
pulse-oximetry code is SpO2" rule, the same units and possible ranges.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime, tzinfo

from service.hl7v2 import tables
from service.hl7v2.errors import ErrorCode, Location
from service.hl7v2.message import Segment
from service.hl7v2.notes import Notes
from service.hl7v2.specimen import OrderSpecimen
from service.hl7v2.times import V2Time, parse_dtm
from service.hl7v2.values import has_value, read_value
from service.intake.model import IntakeIssue, Measurement, Quantity, Severity, Source, Specimen
from service.terminology import codes
from service.terminology.codes import Concept
from service.terminology.local_codes import LocalCodeMap

_E = ErrorCode

ResultKey = tuple[str, str, datetime | None]  # (identified code, OBX-4 sub-id, time)


@dataclass(slots=True)
class Order:
    """One order group: its OBR, the OBR-7 time, its OBX and SPM segments, its specimen."""

    obr: Segment
    time: V2Time | None = None
    obxs: list[Segment] = field(default_factory=list)
    spms: list[Segment] = field(default_factory=list)
    specimen: OrderSpecimen | None = None


@dataclass(slots=True)
class Clock:
    """How times without an offset are read: MSH-7's offset, else UTC (reported once)."""

    zone: tzinfo | None
    assumed_utc: bool = False

    def read(self, text: str, at: Location, notes: Notes) -> V2Time | None:
        try:
            when = parse_dtm(text, self.zone)
        except ValueError as exc:
            notes.problem(_E.DATA_TYPE, str(exc), at)
            return None
        if not when.zoned and self.zone is None:
            self.assumed_utc = True
        return when


@dataclass(slots=True)
class Result:
    """One used OBX: its status rank, correction key, what it sent, and what it gave."""

    obx: Segment
    status: str
    key: ResultKey
    sent: tuple[str, str]  # OBX-5 and OBX-6 as sent, to tell a repeat from a change
    measurements: list[Measurement]
    issues: list[IntakeIssue]

    @property
    def rank(self) -> int:
        return tables.USED_STATUS_RANK[self.status]


def codings(obx: Segment) -> list[tuple[str, str, str]]:
    """(v2 coding system, FHIR system, code) of OBX-3's identifier triplets, in order."""
    parts = obx.components(3) + [""] * 12
    found = []
    for code, system in ((parts[0], parts[2]), (parts[3], parts[5]), (parts[9], parts[11])):
        if code:
            found.append((system, tables.fhir_system(system), code))
    return found


def identify(
    found: list[tuple[str, str, str]], concept_map: LocalCodeMap | None
) -> tuple[Concept, str] | None:
    """The Concept and the code that named it: known codes first, local codes through the
    site ConceptMap only when no coding is known directly (as the FHIR adapter does)."""
    hit = next(
        ((c, code) for _, s, code in found if (c := codes.concept_for(s, code)) is not None), None
    )
    if hit is None and concept_map is not None:
        mapped = (concept_map.loinc_for(s, code) for _, s, code in found)
        loinc = next((m for m in mapped if m is not None), None)
        hit = None if loinc is None else (codes.LOINC_CONCEPTS[loinc], loinc)
    # 2708-6 beside a pulse-oximetry code is SpO2 (US Core Pulse Oximetry profile).
    if (
        hit is not None
        and hit[0].quantity is Quantity.ARTERIAL_SO2
        and any(s == codes.LOINC and c in codes.PULSE_OXIMETRY_LOINC for _, s, c in found)
    ):
        hit = (codes.LOINC_CONCEPTS[codes.SPO2_LOINC], codes.SPO2_LOINC)
    return hit


class ObservationReader:
    """Reads the OBX segments of one message into ``Result``s."""

    def __init__(self, clock: Clock, notes: Notes, concept_map: LocalCodeMap | None) -> None:
        self.clock, self.notes, self.concept_map = clock, notes, concept_map

    def read(self, obx: Segment, order: Order) -> Result | None:
        """The result of one OBX, or None (ignored and reported, or a problem recorded)."""
        notes = self.notes
        status = obx.value(11).strip()
        found = codings(obx)
        if not status:
            reason = "OBX-11 (result status) is required"
            notes.problem(_E.REQUIRED_FIELD_MISSING, reason, obx.at(11))
            return None
        if status not in tables.STATUS_NAMES:
            notes.problem(_E.TABLE_VALUE_NOT_FOUND, "not an HL7 table 0085 status", obx.at(11))
            return None
        if not found:
            reason = "OBX-3 (observation identifier) is required"
            notes.problem(_E.REQUIRED_FIELD_MISSING, reason, obx.at(3, 1))
            return None
        if status not in tables.USED_STATUS_RANK:
            message = f"result status '{status}' ({tables.STATUS_NAMES[status]}): not used"
            notes.issue("observation-ignored", Severity.INFORMATION, message, obx.at(11))
            return None
        hit = identify(found, self.concept_map)
        if hit is None:
            # The codes sent are not quoted: an error names the field, never what it holds.
            count = len(found)
            message = f"no code the service reads ({count} code{'s' if count > 1 else ''} sent)"
            notes.issue("observation-ignored", Severity.INFORMATION, message, obx.at(3))
            return None
        concept, code = hit
        local = Notes()
        time = self._time(obx, order, local)
        measurements: list[Measurement] = []
        if not has_value(obx):
            local.issue("observation-ignored", Severity.INFORMATION, "no value sent", obx.at(5))
        else:
            reading = read_value(obx, concept, local)
            if reading is not None:
                quantity, specimen = self._specimen(obx, concept, order, local)
                measurements.append(
                    Measurement(
                        quantity=quantity,
                        value=reading.value,
                        time=time,
                        source=Source(f"Observation/obx-{obx.sequence}", str(obx.at())),
                        specimen=specimen,
                        sent_value=reading.sent_value,
                        sent_unit=reading.sent_unit,
                        fio2_source=concept.fio2_source,
                    )
                )
        notes.problems += local.problems
        key = (code, obx.value(4).strip(), time)
        return Result(obx, status, key, (obx.raw(5), obx.raw(6)), measurements, local.issues)

    def _time(self, obx: Segment, order: Order, notes: Notes) -> datetime | None:
        """OBX-14, else the order's OBR-7 (V2-to-FHIR: effective[x])."""
        text = obx.value(14).strip()
        if text:
            when, at = self.clock.read(text, obx.at(14), notes), obx.at(14)
        else:
            when, at = order.time, order.obr.at(7)
        if when is None:
            return None
        if not when.precise:
            message = "a time without minutes: pairing by time is unreliable"
            notes.issue("time-imprecise", Severity.WARNING, message, at)
        return when.value

    def _specimen(
        self, obx: Segment, concept: Concept, order: Order, notes: Notes
    ) -> tuple[Quantity, Specimen | None]:
        quantity, specimen = concept.quantity, concept.specimen
        sent = order.specimen
        if sent is None or specimen is None:
            return quantity, specimen
        if concept.by_specimen is not None:  # a "Bld" code: the specimen comes from the order
            if sent.known:
                return concept.by_specimen.get(sent.specimen, quantity), sent.specimen
            message = f"blood sample of unstated type: {sent.reason}; not taken as arterial"
            notes.issue("specimen-unknown", Severity.WARNING, message, sent.location)
            return quantity, Specimen.UNKNOWN
        if sent.known and sent.specimen is not specimen:
            message = (
                f"OBX-3 names {specimen.value} blood but {sent.location} names "
                f"{sent.specimen.value} blood"
            )
            if specimen is Specimen.ARTERIAL:
                # Taken as the order says, so the value is never used as arterial on doubt.
                message += "; not taken as arterial"
                specimen = sent.specimen
            notes.issue("specimen-conflict", Severity.WARNING, message, obx.at(3))
        return quantity, specimen
