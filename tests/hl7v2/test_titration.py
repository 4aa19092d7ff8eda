"""A titration sent as HL7 v2: the same points and fit as the FHIR Bundle of the same
readings, and the fit in the ORU^R01 reply (sub-id 4) with its ranges and the caution."""

from __future__ import annotations

from datetime import datetime

import pytest

from service.fhir.extract import read_bundle
from service.hl7v2.intake import read_oru
from service.hl7v2.message import parse_message
from service.hl7v2.result import oru_result
from service.physiology.oxygen_prediction import CAUTION
from service.runtime import Runtime
from tests.titration_reference import EXPECTED, SCENARIOS, bundle_of, charted

from .builders import MMHG, PERCENT, message, obr, obx, pid

SCENARIO = next(s for s in SCENARIOS if s.name == "mixed-shunt-and-vq")
CODES = {
    "fio2": ("3150-0", PERCENT, 100.0),
    "spo2": ("59408-5", PERCENT, 1.0),
    "pao2": ("2703-7", MMHG, 1.0),
    "paco2": ("2019-8", MMHG, 1.0),
    "ph": ("2744-1", "[pH]^^UCUM", 1.0),
    "hco3": ("1960-4", "mmol/L^^UCUM", 1.0),
    "hb": ("718-7", "g/dL^^UCUM", 1.0),
    "pb": ("76268-2", MMHG, 1.0),
}


def _v2() -> str:
    from datetime import timedelta

    start = datetime.fromisoformat(SCENARIO.start)
    segments = [obr()]
    for n, (_, minute, what, value) in enumerate(charted(SCENARIO), start=1):
        code, unit, scale = CODES[what]
        when = (start + timedelta(minutes=minute)).strftime("%Y%m%d%H%M%S+0000")
        segments.append(obx(n, code, f"{float(value) * scale:g}", unit, when=when))
    return message(*segments, patient=pid(born=SCENARIO.birth_date.replace("-", "")))


def test_v2_and_fhir_give_the_same_titration() -> None:
    runtime = Runtime.load()
    from_v2 = runtime.assess_intake(read_oru(parse_message(_v2())))
    from_fhir = runtime.assess_intake(read_bundle(bundle_of(SCENARIO)))
    assert from_v2.titration is not None and from_fhir.titration is not None
    v2_points = [(p.kind, p.value, p.inspired.fio2) for p in from_v2.titration.series.points]
    fhir_points = [(p.kind, p.value, p.inspired.fio2) for p in from_fhir.titration.series.points]
    assert v2_points == fhir_points
    assert from_v2.titration.facts == pytest.approx(from_fhir.titration.facts)
    expected = EXPECTED[SCENARIO.name].grades
    assert {m.code.value: m.grade.value for m in from_v2.mechanisms} == expected


def test_the_reply_carries_the_fit_with_its_ranges_and_the_caution() -> None:
    runtime = Runtime.load()
    sent = parse_message(_v2())
    assessment = runtime.assess_intake(read_oru(sent))
    reply = oru_result(sent, assessment, settings=runtime.settings)
    segments = reply.split("\r")
    fitted = [s for s in segments if s.startswith("OBX|") and s.split("|")[4] == "4"]
    codes = [s.split("|")[3].split("^")[0] for s in fitted]
    assert codes == ["fitted-shunt", "fitted-vq-term", "predicted-fio2-for-target"]
    shunt = float(fitted[0].split("|")[5])
    assert shunt == pytest.approx(100.0 * SCENARIO.shunt, abs=3.0)  # the truth, 16 %
    notes = [s for s in segments if s.startswith("NTE|")]
    assert any("range " in n and "95 %" in n for n in notes)
    assert any(CAUTION.split(":")[0] in n for n in notes)
