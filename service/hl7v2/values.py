"""One OBX value (OBX-2, OBX-5, OBX-6) read and converted once to its quantity's canonical unit.

V2-to-FHIR (segment OBX to Observation) maps OBX-5 by OBX-2: NM to ``valueQuantity.value``; SN to a
``valueQuantity`` when it is one number, to a ``valueQuantity`` with ``comparator`` when it
carries ``<``, ``>``, ``<=``, ``>=`` and to a ``valueRange``/``valueRatio`` when it carries a
separator; CWE/CE/CNE to ``valueCodeableConcept``; ST/TX/FT to ``valueString``; OBX-6 to the
Quantity's unit and UCUM code. The service then does what the FHIR adapter does with those
FHIR values: a bound, a range, a ratio or a string is not a measured value and is refused
with its reason (``observation-ignored``), never read as a number; the UCUM unit is converted
through ``service.physiology.units``; an impossible value is ``value-out-of-range`` and not
used. A value that is not of its declared type, or a unit the quantity cannot take, refuses
the message (AE) with the field named.
"""

from __future__ import annotations

import math
import re

from service.exceptions import ImpossibleValueError, UnitError
from service.hl7v2 import tables
from service.hl7v2.errors import ErrorCode
from service.hl7v2.message import Segment
from service.hl7v2.notes import Notes
from service.intake.model import Quantity, Severity
from service.intake.plausibility import out_of_range
from service.intake.reading import Reading, settle
from service.physiology.units import (
    FIO2_LIMITS,
    NOT_UCUM,
    Dimension,
    accepted_units,
    unit_named,
)
from service.terminology import codes
from service.terminology.codes import Concept

_NM = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)", re.ASCII)
_E = ErrorCode


def has_value(obx: Segment) -> bool:
    """Whether OBX-5 holds anything ("" is the v2 explicit null)."""
    return obx.raw(5).strip() not in ("", '""')


def read_value(obx: Segment, concept: Concept, notes: Notes) -> Reading | None:
    """The value of ``obx`` for ``concept``, or None (a problem or an issue was recorded)."""
    value_type = obx.value(2).strip()
    if not value_type:
        notes.problem(_E.REQUIRED_FIELD_MISSING, "OBX-2 (value type) is required", obx.at(2))
        return None
    if value_type not in tables.VALUE_TYPES:
        notes.problem(_E.TABLE_VALUE_NOT_FOUND, "not an HL7 table 0125 value type", obx.at(2))
        return None
    if obx.repetitions(5) > 1:
        notes.problem(_E.DATA_TYPE, "OBX-5 repeats; one value is expected", obx.at(5))
        return None
    quantity = concept.quantity
    if quantity is Quantity.OXYGEN_DEVICE:
        if value_type in tables.CODED_TYPES:
            return _device(obx, notes)
        expected = "a coded value (CWE, CE or CNE)"
    elif value_type in tables.NUMERIC_TYPES:
        number = _number(obx, value_type, quantity, notes)
        return None if number is None else _quantity(obx, number, concept, notes)
    else:
        expected = "a numeric value (NM or SN)"
    message = f"{quantity.value} is read from {expected}, not {value_type}; not used"
    notes.issue("observation-ignored", Severity.WARNING, message, obx.at(5))
    return None


def _nm(text: str) -> float | None:
    text = text.strip()
    if not _NM.fullmatch(text):
        return None
    number = float(text)
    return number if math.isfinite(number) else None


def _number(obx: Segment, value_type: str, quantity: Quantity, notes: Notes) -> float | None:
    parts = obx.components(5)
    if value_type == "NM":
        number = _nm(obx.value(5)) if len(parts) == 1 else None
        if number is None:
            notes.problem(_E.DATA_TYPE, "not a number (value type NM)", obx.at(5))
        return number
    comparator, first, separator, second = [*parts, "", "", "", ""][:4]
    number = _nm(first)
    if comparator not in tables.SN_COMPARATORS:
        notes.problem(_E.TABLE_VALUE_NOT_FOUND, "not an SN comparator", obx.at(5, 1))
    elif separator and separator not in tables.SN_SEPARATORS:
        notes.problem(_E.TABLE_VALUE_NOT_FOUND, "not an SN separator/suffix", obx.at(5, 3))
    elif number is None:
        notes.problem(_E.DATA_TYPE, "SN without a number in component 2", obx.at(5, 2))
    elif separator or second:
        message = (
            f"{quantity.value} is a range or ratio (SN separator '{separator}'), "
            "not one measured value; not used"
        )
        notes.issue("observation-ignored", Severity.WARNING, message, obx.at(5, 3))
    elif comparator not in ("", "="):
        message = (
            f"{quantity.value} is a bound (SN comparator '{comparator}'), "
            "not a measured value; not used"
        )
        notes.issue("observation-ignored", Severity.WARNING, message, obx.at(5, 1))
    else:
        return number
    return None


_NO_UNIT = ""  # a problem was recorded: the OBX cannot be read


def _unit(obx: Segment, concept: Concept, notes: Notes) -> str | None:
    """The UCUM unit to convert from, None when OBX-6 is empty, or ``_NO_UNIT`` (refused).

    A UCUM triplet of OBX-6 (identifier with coding system UCUM, or the alternate one) is
    read as it is. As in the FHIR adapter, what is unambiguous is read with a warning
    (``unit-not-ucum``): a well-known spelling that is not UCUM (``mmHg``) under UCUM, or an
    identifier with no coding system that names a unit this value takes. An identifier of
    another coding system (``99LOCAL``, ``L``) with no UCUM alternate is refused: a local code
    is not UCUM's, whatever it looks like.
    """
    parts = obx.components(6) + [""] * 6
    for code, system in ((parts[0], parts[2]), (parts[3], parts[5])):
        if code and tables.fhir_system(system) == codes.UCUM:
            if code in NOT_UCUM:
                message = f"{unit_named(code)} is not UCUM; read as UCUM '{NOT_UCUM[code]}'"
                notes.issue("unit-not-ucum", Severity.WARNING, message, obx.at(6))
                return NOT_UCUM[code]
            return code
    code, system = parts[0], parts[2]
    if code and system:
        reason = (
            "OBX-6 is coded in another system than UCUM; send the UCUM code (e.g. mm[Hg]^^UCUM)"
        )
        notes.problem(_E.TABLE_VALUE_NOT_FOUND, reason, obx.at(6))
        return _NO_UNIT
    if code:
        meant = NOT_UCUM.get(code, code)
        if concept.dimension is not None and meant in accepted_units(concept.dimension):
            message = f"OBX-6 names no coding system; read as UCUM '{meant}'"
            notes.issue("unit-not-ucum", Severity.WARNING, message, obx.at(6))
            return meant
        reason = "OBX-6 names no coding system and no unit this value takes; send a UCUM code"
        notes.problem(_E.TABLE_VALUE_NOT_FOUND, reason, obx.at(6))
        return _NO_UNIT
    return "[pH]" if concept.dimension is Dimension.PH else None  # pH has no unit


def _convert(
    obx: Segment, value: float, unit: str, concept: Concept, notes: Notes
) -> tuple[float, bool] | None:
    quantity = concept.quantity
    try:
        return concept.to_canonical(value, unit)
    except UnitError as exc:
        accepted = ", ".join(exc.accepted)
        named = unit_named(unit)
        reason = f"{named} cannot be used for {quantity.value}; accepted (UCUM): {accepted}"
        notes.problem(_E.TABLE_VALUE_NOT_FOUND, reason, obx.at(6))
    except ImpossibleValueError:
        low, high = FIO2_LIMITS
        message = (
            f"fio2 is not between {low:g} and {high:g} once read as a fraction (sent in "
            f"{unit_named(unit)}); the value is not used"
        )
        notes.issue("value-out-of-range", Severity.ERROR, message, obx.at(5))
    return None


def _quantity(obx: Segment, value: float, concept: Concept, notes: Notes) -> Reading | None:
    quantity = concept.quantity
    unit = _unit(obx, concept, notes)
    if unit == _NO_UNIT:
        return None
    if unit is None:
        required = "a unit is required: a UCUM code in OBX-6 (e.g. mm[Hg]^^UCUM)"
        notes.problem(_E.REQUIRED_FIELD_MISSING, required, obx.at(6))
        return None
    converted = _convert(obx, value, unit, concept, notes)
    if converted is None:
        return None
    canonical, reinterpreted = converted
    reason = out_of_range(quantity, canonical)
    if reason is not None:
        hint = " (was a fraction sent with unit '%'?)" if unit == "%" and 0 < value <= 1 else ""
        message = f"{quantity.value} is impossible: {reason}{hint}; the value is not used"
        notes.issue("value-out-of-range", Severity.ERROR, message, obx.at(5))
        return None
    canonical, sent_value, sent_unit, report = settle(
        value, unit, canonical, reinterpreted, quantity
    )
    if report is not None:
        severity, message = report
        notes.issue("unit-converted", severity, message, obx.at(6))
    return Reading(canonical, sent_value=sent_value, sent_unit=sent_unit)


def _device(obx: Segment, notes: Notes) -> Reading | None:
    """The oxygen device of a coded OBX-5 (our device codes or SNOMED CT)."""
    parts = obx.components(5) + [""] * 6
    sent = 0
    for code, v2_system in ((parts[0], parts[2]), (parts[3], parts[5])):
        if not code:
            continue
        system = tables.fhir_system(v2_system)
        if system == codes.OXYGEN_DEVICE_CODES and code in codes.OXYGEN_DEVICES:
            return Reading(code)
        if system == codes.SNOMED_CT and code in codes.SNOMED_OXYGEN_DEVICES:
            return Reading(codes.SNOMED_OXYGEN_DEVICES[code])
        sent += 1
    # The codes sent are not quoted: an error names the field, never what it holds.
    named = "no code" if not sent else f"{sent} code{'s' if sent > 1 else ''} sent"
    message = (
        f"oxygen device not recognised ({named}); use {tables.DEVICE_SYSTEM} "
        f"({codes.OXYGEN_DEVICE_CODES}) or SCT"
    )
    notes.issue("observation-ignored", Severity.INFORMATION, message, obx.at(5))
    return None
