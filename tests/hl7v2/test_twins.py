"""The v2 twins of two demo Bundles are assessed exactly as their FHIR originals.

``fixtures/hl7v2/<name>.hl7`` carries the same invented data as
``fixtures/demo/<name>.bundle.json``, mapped field by field as V2-to-FHIR does (IG
hl7.fhir.uv.v2mappings: PID-7 -> birthDate, PID-8 -> gender, OBX-3 -> code, OBX-5/OBX-6 ->
valueQuantity, OBX-14 -> effectiveDateTime, SPM-4 -> Specimen.type). The altitude, which FHIR
carries as ``Location.position.altitude``, is sent as an OBX with the project input code
``altitude`` (README, What it reads).
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

import hl7  # type: ignore[import-untyped]
import orjson
import pytest

from service.assess.result import Assessment
from service.engine import Mechanism
from service.fhir.extract import read_bundle
from service.hl7v2.handle import handle_v2
from service.hl7v2.intake import read_oru
from service.hl7v2.message import parse_message
from service.runtime import Runtime

from .builders import ROOT, fixture

NOW = datetime(2026, 11, 22, 8, 0, tzinfo=UTC)
TWINS = ["post-operative-drowsiness", "altitude-visitor"]


def _summary(a: Assessment) -> dict[str, Any]:
    return {
        "pattern": a.pattern,
        "hypoxaemia": a.hypoxaemia,
        "status": a.status,
        "grades": {m.code: m.grade for m in a.mechanisms},
        "rules": {m.code: m.rules for m in a.mechanisms},
        "derived": {k: round(d.value, 6) for k, d in a.index.derived.items()},
        "findings": sorted(f.code for f in a.findings),
        "data_requested": a.data_requested,
        "gases": len(a.gases),
    }


def _both(name: str, runtime: Runtime) -> tuple[Assessment, Assessment]:
    bundle = orjson.loads((ROOT / "fixtures" / "demo" / f"{name}.bundle.json").read_bytes())
    from_fhir = runtime.assess_intake(read_bundle(bundle), now=NOW)
    from_v2 = runtime.assess_intake(read_oru(parse_message(fixture(f"{name}.hl7"))), now=NOW)
    return from_fhir, from_v2


@pytest.mark.parametrize("name", TWINS)
def test_the_v2_twin_is_assessed_as_the_fhir_original(name: str, runtime: Runtime) -> None:
    from_fhir, from_v2 = _both(name, runtime)
    assert _summary(from_v2) == _summary(from_fhir)


def test_hypoventilation_picture_is_aa_and_graded_likely_on_both_paths(runtime: Runtime) -> None:
    from_fhir, from_v2 = _both("post-operative-drowsiness", runtime)
    for a in (from_fhir, from_v2):
        assert a.pattern == "single"
        assert {m.code: m.grade for m in a.mechanisms}[Mechanism.HYPOVENTILATION] == "likely"
    reply = hl7.parse(handle_v2(fixture("post-operative-drowsiness.hl7"), runtime).body.decode())
    assert (
        str(reply.segment("MSA"))
        == "MSA|AA|DEMO-POSTOP-0001|assessed: single; likely hypoventilation"
    )


def test_altitude_visitor_is_low_inspired_oxygen_on_both_paths(runtime: Runtime) -> None:
    from_fhir, from_v2 = _both("altitude-visitor", runtime)
    for a in (from_fhir, from_v2):
        assert {m.code: m.grade for m in a.mechanisms}[Mechanism.LOW_INSPIRED_OXYGEN] == "likely"
        assert a.index.barometric_source == "altitude-model"


def test_a_kpa_feed_is_graded_as_the_mmhg_feed(runtime: Runtime) -> None:
    # Many laboratories outside the US send kPa (common practice); UCUM 1 kPa = 7.500638 mm[Hg].
    text = fixture("post-operative-drowsiness.hl7")
    for mmhg in ("62", "65", "762"):
        kpa = f"{float(mmhg) / 7.500638:.4f}"
        text = text.replace(f"||{mmhg}|mm[Hg]^mmHg^UCUM|", f"||{kpa}|kPa^kPa^UCUM|")
    assert "mm[Hg]^mmHg" not in text
    in_kpa = runtime.assess_intake(read_oru(parse_message(text)), now=NOW)
    _, in_mmhg = _both("post-operative-drowsiness", runtime)
    assert {m.code: m.grade for m in in_kpa.mechanisms} == {
        m.code: m.grade for m in in_mmhg.mechanisms
    }
    assert in_kpa.pattern == in_mmhg.pattern == "single"
    assert in_kpa.index.derived["aa-gradient"].value == pytest.approx(
        in_mmhg.index.derived["aa-gradient"].value, abs=0.01
    )


def test_serial_gases_in_two_order_groups_are_assessed_as_serial_gases(runtime: Runtime) -> None:
    # Two OBR groups, an hour apart, the later one on more oxygen: two gases, latest first.
    first = fixture("post-operative-drowsiness.hl7").replace("\n", "\r")
    later = (
        "OBR|3|ORD-0003|LAB-0003|24336-0^Gas panel - Arterial blood^LN|||20261121150500+0000\r"
        "OBX|1|NM|2703-7^^LN||95|mm[Hg]^^UCUM|||||F\r"
        "OBX|2|NM|2019-8^^LN||60|mm[Hg]^^UCUM|||||F\r"
        "OBX|3|NM|3150-0^^LN||28|%^^UCUM|||||F\r"
    )
    a = runtime.assess_intake(read_oru(parse_message(first + later)), now=NOW)
    assert len(a.gases) == 2
    assert a.gases[0].index and a.gases[0].facts.facts["arterial_po2"] == 95.0
    assert a.gases[1].facts.facts["arterial_po2"] == 62.0
