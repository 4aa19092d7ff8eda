"""One pipeline: the v2 adapter gives the same measurements and issue codes as the FHIR
adapter for the same observation, so everything after the intake cannot tell them apart.

V2F (HL7 V2-to-FHIR IG): OBX-3 -> code, OBX-5 (NM) -> valueQuantity.value, OBX-6 ->
valueQuantity.code; each case is sent both ways and read by each adapter.
"""

from __future__ import annotations

import pytest

from service.fhir.extract import read_bundle
from service.hl7v2.intake import read_oru
from service.hl7v2.message import parse_message
from service.intake.model import Intake
from tests.fhir import builders as fhir

from .builders import message, obr, obx

CASES = [
    ("2703-7", 62.0, "mm[Hg]"),
    ("2703-7", 8.0, "kPa"),
    ("2019-8", 5.3, "kPa"),
    ("2744-1", 7.4, "[pH]"),
    ("1960-4", 24.0, "meq/L"),
    ("3150-0", 21.0, "%"),
    ("3150-0", 0.4, "%"),
    ("71835-3", 40.0, "1"),
    ("3150-0", 0.05, "1"),
    ("59408-5", 97.0, "%"),
    ("2708-6", 0.97, "%"),
    ("8310-5", 98.6, "[degF]"),
    ("718-7", 140.0, "g/L"),
    ("2703-7", -5.0, "mm[Hg]"),
    ("3151-8", 2.0, "L/min"),
    ("76268-2", 1013.0, "hPa"),
    ("20077-4", 5.0, "cm[H2O]"),
]


def _shape(intake: Intake) -> tuple[object, ...]:
    measurements = [
        (m.quantity, round(float(m.value), 9), m.sent_value, m.sent_unit, m.specimen, m.fio2_source)
        for m in intake.measurements
        if not isinstance(m.value, str)
    ]
    return measurements, [(i.code, i.severity) for i in intake.issues]


@pytest.mark.parametrize(("code", "value", "unit"), CASES)
def test_v2_and_fhir_read_the_same_observation_alike(code: str, value: float, unit: str) -> None:
    bundle = fhir.bundle(fhir.patient(), fhir.observation(code, value, unit))
    from_fhir = read_bundle(bundle)
    text = message(obr(), obx(1, code, f"{value:g}", f"{unit}^^UCUM"))
    from_v2 = read_oru(parse_message(text))
    assert _shape(from_v2) == _shape(from_fhir)
