"""An ``Intake`` written back as a FHIR Bundle: what the service read, and nothing else.

The bench saves a case as a fixture this way, whatever it came as (a Bundle, an HL7 v2
message) and whatever the what-if panel changed: one Observation per measurement, coded with
the code the service reads it by (the first LOINC code of its quantity, the project input
codes where LOINC has none, the specimen-neutral blood code with no specimen for a value whose
specimen stayed unknown), the value as the sender wrote it when it was converted, else in its
canonical unit; the patient's birth date and gender only. No name, identifier, free text or
original resource id is carried: ids are numbered afresh. Every resource is tagged HTEST.

Reading the Bundle back (``extract.read_bundle``) gives the same measurements (a test checks it
on every fixture): the round trip is the contract of this module.
"""

from __future__ import annotations

from typing import Any

from service.fhir.codes import TEST_DATA_TAG_CODE, TEST_DATA_TAG_SYSTEM
from service.intake.model import (
    CODED,
    QUANTITY_UNITS,
    Fio2Source,
    Intake,
    Measurement,
    Quantity,
    Specimen,
)
from service.terminology.codes import CODE_SYSTEM_OF, LOINC, UCUM, code_for_fact

Json = dict[str, Any]

PATIENT_ID = "patient"
TAG = {"tag": [{"system": TEST_DATA_TAG_SYSTEM, "code": TEST_DATA_TAG_CODE}]}
# A value whose specimen stayed unknown was read from the specimen-neutral blood code.
UNSTATED_SPECIMEN_CODES = {
    Quantity.ARTERIAL_PO2: "11556-8",
    Quantity.ARTERIAL_PCO2: "11557-6",
    Quantity.ARTERIAL_PH: "11558-4",
}
VENTILATOR_FIO2 = "19994-3"
# A value read from a code that names its specimen where the usual code does not.
WITH_SPECIMEN = {(Quantity.HAEMOGLOBIN, Specimen.ARTERIAL): "30313-1"}
# Lower limits of normal travel as referenceRange.low of the value they belong to.
LOWER_LIMIT_OF = {
    Quantity.DLCO_LOWER_LIMIT: Quantity.DLCO,
    Quantity.DLCO_PERCENT_LOWER_LIMIT: Quantity.DLCO_PERCENT_PREDICTED,
}
# Fractions are written in percent, as people chart them (the reader takes both).
PERCENT = frozenset(q for q, unit in QUANTITY_UNITS.items() if unit == "1")


class NotWritable(ValueError):
    """A measurement the Bundle cannot carry (a quantity with no code to write it by)."""


def _coding(m: Measurement) -> Json:
    if m.specimen is Specimen.UNKNOWN and m.quantity in UNSTATED_SPECIMEN_CODES:
        return {"system": LOINC, "code": UNSTATED_SPECIMEN_CODES[m.quantity]}
    if m.quantity is Quantity.FIO2 and m.fio2_source is Fio2Source.VENTILATOR_SETTING:
        return {"system": LOINC, "code": VENTILATOR_FIO2}
    if m.specimen is not None and (m.quantity, m.specimen) in WITH_SPECIMEN:
        return {"system": LOINC, "code": WITH_SPECIMEN[(m.quantity, m.specimen)]}
    found = code_for_fact(m.quantity.value)
    if found is None:
        raise NotWritable(f"no code to write {m.quantity.value} by")
    system, code = found
    return {"system": system, "code": code}


def _quantity(value: float, unit: str) -> Json:
    return {"value": value, "unit": unit, "system": UCUM, "code": unit}


def _value(m: Measurement) -> Json:
    if m.quantity in CODED:
        assert isinstance(m.value, str)
        coding = {"system": CODE_SYSTEM_OF[m.quantity], "code": m.value}
        return {"valueCodeableConcept": {"coding": [coding]}}
    if m.sent_value is not None and m.sent_unit is not None:
        return {"valueQuantity": _quantity(m.sent_value, m.sent_unit)}
    assert isinstance(m.value, float | int)
    value = float(m.value)
    if m.quantity in PERCENT:
        return {"valueQuantity": _quantity(round(value * 100.0, 6), "%")}
    return {"valueQuantity": _quantity(value, m.unit)}


def _low(m: Measurement) -> Json:
    assert isinstance(m.value, float | int)
    if m.quantity in PERCENT:
        return _quantity(round(float(m.value) * 100.0, 6), "%")
    return _quantity(float(m.value), m.unit)


def _observation(number: int, m: Measurement, limits: list[Measurement]) -> Json:
    resource: Json = {
        "resourceType": "Observation",
        "id": f"o{number}",
        "meta": TAG,
        "status": "final",
        "code": {"coding": [_coding(m)]},
        "subject": {"reference": f"Patient/{PATIENT_ID}"},
    }
    if m.time is not None:
        resource["effectiveDateTime"] = m.time.isoformat()
    resource.update(_value(m))
    for limit in limits:
        resource["referenceRange"] = [{"low": _low(limit)}]
    return resource


def _limits(intake: Intake) -> dict[int, list[Measurement]]:
    """The lower limits of normal, by the position of the value they belong to."""
    found: dict[int, list[Measurement]] = {}
    for limit in intake.measurements:
        owner = LOWER_LIMIT_OF.get(limit.quantity)
        if owner is None:
            continue
        for position, m in enumerate(intake.measurements):
            if m.quantity is owner and m.time == limit.time:
                found.setdefault(position, []).append(limit)
                break
    return found


def intake_bundle(intake: Intake, *, bundle_id: str = "case") -> Json:
    """The Bundle that reads back as ``intake`` (see the module docstring).

    Raises:
        NotWritable: a measurement of a quantity with no code (none the readers produce).
    """
    entries: list[Json] = []
    patient: Json = {"resourceType": "Patient", "id": PATIENT_ID, "meta": TAG}
    if intake.patient is not None:
        if intake.patient.birth_date is not None:
            patient["birthDate"] = intake.patient.birth_date.isoformat()
        if intake.patient.gender is not None:
            patient["gender"] = intake.patient.gender
    entries.append({"fullUrl": f"urn:oxyrule:Patient/{PATIENT_ID}", "resource": patient})
    limits = _limits(intake)
    number = 0
    for position, m in enumerate(intake.measurements):
        if m.quantity in LOWER_LIMIT_OF:
            continue
        number += 1
        resource = _observation(number, m, limits.get(position, []))
        entries.append({"fullUrl": f"urn:oxyrule:Observation/o{number}", "resource": resource})
    return {
        "resourceType": "Bundle",
        "id": bundle_id,
        "meta": TAG,
        "type": "collection",
        "entry": entries,
    }


__all__ = ["NotWritable", "intake_bundle"]
