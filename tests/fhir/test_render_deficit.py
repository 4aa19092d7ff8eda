"""The PaO2 deficit partition in the FHIR result: the ``deficit`` parameter of each gas and the
"PaO2 deficit partition" Observation, checked against numbers computed independently
(``tests.deficit_reference``: Cerveri 1995, the alveolar gas equation, IAPWS-IF97)."""

from __future__ import annotations

from typing import Any

import pytest

from service.fhir.models import validate_resource
from service.runtime import Runtime
from tests.contract_shape import contract_problems
from tests.deficit_reference import KPA_PER_MMHG, reference, reference_bundle
from tests.fhir.builders import bundle, observation, patient

Json = dict[str, Any]
DERIVED = "https://oxyrule.org/fhir/CodeSystem/derived"
# Display precision: 0.1 mm[Hg], 0.01 kPa (each value rounded once).
MMHG_TOLERANCE, KPA_TOLERANCE = 0.05 + 1e-9, 0.005 + 1e-9

BASE = "https://example.org/fhir/"  # the base of the reference Bundle's fullUrls


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def _resources(result: Json) -> list[Json]:
    return [e["resource"] for e in result["entry"]]


def _parameters(result: Json) -> list[Json]:
    params = next(r for r in _resources(result) if r["resourceType"] == "Parameters")
    parameters: list[Json] = params["parameter"]
    return parameters


def _deficits(result: Json) -> list[dict[str, Json]]:
    return [
        {p["name"]: p for p in param["part"]}
        for param in _parameters(result)
        if param["name"] == "deficit"
    ]


def _value(part: Json) -> float:
    value: float = part["valueQuantity"]["value"]
    return value


def _observation(result: Json, identifier: str) -> Json:
    return next(r for r in _resources(result) if r.get("id") == identifier)


def _components(obs: Json) -> dict[str, Json]:
    return {c["code"]["coding"][0]["code"]: c for c in obs["component"]}


@pytest.mark.parametrize(
    ("unit", "factor", "tolerance"),
    [("mm[Hg]", 1.0, MMHG_TOLERANCE), ("kPa", KPA_PER_MMHG, KPA_TOLERANCE)],
)
def test_the_deficit_parameter_holds_the_independently_computed_partition(
    runtime: Runtime, unit: str, factor: float, tolerance: float
) -> None:
    ref = reference()
    result = runtime.assess_bundle(reference_bundle(), pressure_unit=unit)  # type: ignore[arg-type]
    (deficit,) = _deficits(result)
    # The input's entries have RESTful fullUrls: the result points at them absolutely.
    assert deficit["observation"]["valueReference"] == {
        "reference": f"{BASE}Observation/pao2",
        "type": "Observation",
    }
    assert deficit["index"]["valueBoolean"] is True
    assert deficit["pao2-basis"]["valueCode"] == "measured"
    expected = {
        "expected-pao2": ref.expected,  # Cerveri 1995 at 64 years: 81.84 mmHg
        "pao2": 50.0,
        "fall": ref.fall,
        **ref.parts(),
    }
    for name, mmhg in expected.items():
        quantity = deficit[name]["valueQuantity"]
        assert quantity["code"] == unit and quantity["system"] == "http://unitsofmeasure.org"
        assert quantity["value"] == pytest.approx(mmhg * factor, abs=tolerance), name
    # PaCO2 known: no unattributed rest, and nothing stands in for it.
    assert "unattributed" not in deficit
    method = deficit["method"]["valueString"]
    assert "Cerveri 1995" in method and "alveolar gas equation" in method


def test_the_partition_observation_has_a_component_per_part_and_its_inputs(
    runtime: Runtime,
) -> None:
    ref = reference()
    result = runtime.assess_bundle(reference_bundle())
    obs = _observation(result, "pao2-deficit-partition")
    assert obs["code"]["coding"] == [
        {"system": DERIVED, "code": "pao2-deficit-partition", "display": "PaO2 deficit partition"}
    ]
    assert "valueQuantity" not in obs  # the parts are the value
    components = _components(obs)
    assert set(components) == {
        "pao2-expected",
        "pao2-fall",
        "deficit-inspired",
        "deficit-ventilation",
        "deficit-gas-exchange",
    }
    expected = {
        "pao2-expected": ref.expected,
        "pao2-fall": ref.fall,
        "deficit-inspired": ref.inspired,
        "deficit-ventilation": ref.ventilation,
        "deficit-gas-exchange": ref.gas_exchange,
    }
    for code, mmhg in expected.items():
        quantity = components[code]["valueQuantity"]
        assert quantity["code"] == "mm[Hg]"
        assert quantity["value"] == pytest.approx(mmhg, abs=MMHG_TOLERANCE), code
    assert {d["reference"] for d in obs["derivedFrom"]} == {
        f"{BASE}Observation/pao2",
        f"{BASE}Observation/paco2",
        f"{BASE}Observation/fio2",
        f"{BASE}Observation/pb",
    }
    assert "Cerveri 1995" in obs["method"]["text"]
    assessment = _observation(result, "mechanism-assessment")
    entry_url = next(e["fullUrl"] for e in result["entry"] if e["resource"] is obs)
    assert {"reference": entry_url} in assessment["derivedFrom"]
    validate_resource(result)
    assert contract_problems(result) == []


def test_without_paco2_the_rest_is_unattributed_not_split(runtime: Runtime) -> None:
    ref = reference()
    result = runtime.assess_bundle(reference_bundle(with_paco2=False))
    (deficit,) = _deficits(result)
    assert "ventilation" not in deficit and "gas-exchange" not in deficit
    # Without PaCO2 everything beyond the setting is the unattributed rest: the whole fall here.
    assert _value(deficit["unattributed"]) == pytest.approx(ref.fall, abs=MMHG_TOLERANCE)
    assert _value(deficit["inspired"]) == pytest.approx(0.0, abs=MMHG_TOLERANCE)
    components = _components(_observation(result, "pao2-deficit-partition"))
    assert set(components) == {
        "pao2-expected",
        "pao2-fall",
        "deficit-inspired",
        "deficit-unattributed",
    }
    validate_resource(result)


def test_without_fio2_the_gas_says_why_it_has_no_partition(runtime: Runtime) -> None:
    data = bundle(
        patient(),
        observation("2703-7", 50.0, "mm[Hg]", oid="pao2"),
        observation("2019-8", 55.0, "mm[Hg]", oid="paco2"),
        observation("76268-2", 760.0, "mm[Hg]", oid="pb"),
    )
    result = runtime.assess_bundle(data)
    (deficit,) = _deficits(result)
    assert set(deficit) == {"observation", "index", "not-computed"}
    assert "FiO2 not known" in deficit["not-computed"]["valueString"]
    assert not any(r.get("id", "").startswith("pao2-deficit") for r in _resources(result))
    names = [p["name"] for p in _parameters(result)]
    # FiO2 not sent is an input known only as a range: said, one parameter per input.
    uncertain = [p["valueString"] for p in _parameters(result) if p["name"] == "uncertain-input"]
    assert any(u.startswith("FiO2 (not sent") for u in uncertain)
    assert names.count("gas-exchange") == 1
    validate_resource(result)
    assert contract_problems(result) == []


def test_an_unknown_residence_at_altitude_gives_one_partition_per_residence(
    runtime: Runtime,
) -> None:
    # 3,350 m (Cusco): residents' expected PaCO2 30.6 mmHg (Pereira-Victorio 2014), newly
    # arrived visitors' about 40 (little hyperventilation below ~3,000 m then falling: Rahn &
    # Otis 1949). Only the split between inspired and ventilation may differ.
    data = bundle(
        patient(),
        observation("2703-7", 55.0, "mm[Hg]", oid="pao2"),
        observation("2019-8", 30.0, "mm[Hg]", oid="paco2"),
        observation("3150-0", 21.0, "%", oid="fio2"),
        observation(
            "altitude",
            3350.0,
            "m",
            oid="altitude",
            system="https://oxyrule.org/fhir/CodeSystem/input",
        ),
    )
    result = runtime.assess_bundle(data)
    deficits = _deficits(result)
    assert [d["altitude-residence"]["valueCode"] for d in deficits] == ["resident", "visitor"]
    resident, visitor = deficits
    for name in ("expected-pao2", "fall", "gas-exchange", "pao2"):
        assert _value(resident[name]) == _value(visitor[name]), name
    split = [_value(d["inspired"]) + _value(d["ventilation"]) for d in deficits]
    assert split[0] == pytest.approx(split[1], abs=2 * MMHG_TOLERANCE)
    # A resident is expected to breathe more: less of the fall is the setting's.
    assert _value(resident["inspired"]) < _value(visitor["inspired"])
    ids = {r["id"] for r in _resources(result) if r["id"].startswith("pao2-deficit")}
    assert ids == {"pao2-deficit-partition-resident", "pao2-deficit-partition-visitor"}
    for identifier, code in (("resident", "resident"), ("visitor", "visitor")):
        obs = _observation(result, f"pao2-deficit-partition-{identifier}")
        residence = _components(obs)["altitude-residence-assumed"]
        assert residence["valueCodeableConcept"]["coding"][0]["code"] == code
        assert "Residence not sent" in obs["note"][0]["text"]
        assert {d["reference"] for d in obs["derivedFrom"]} == {
            f"{BASE}Observation/pao2",
            f"{BASE}Observation/paco2",
            f"{BASE}Observation/fio2",
            f"{BASE}Observation/altitude",
        }
    validate_resource(result)
    assert contract_problems(result) == []


def test_the_gas_exchange_status_is_a_parameter_and_a_component(runtime: Runtime) -> None:
    # The reference patient's A-a gradient (33.8 mmHg) is far above the normal for 64 years at
    # this alveolar PO2 (16.4 mmHg, tests.deficit_reference): a defect.
    result = runtime.assess_bundle(reference_bundle())
    status = next(p for p in _parameters(result) if p["name"] == "gas-exchange")
    assert status["valueCode"] == "defect"
    components = _components(_observation(result, "mechanism-assessment"))
    coding = components["gas-exchange-status"]["valueCodeableConcept"]["coding"][0]
    assert coding == {
        "system": "https://oxyrule.org/fhir/CodeSystem/gas-exchange-status",
        "code": "defect",
    }
