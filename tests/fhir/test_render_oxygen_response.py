"""The oxygen-response fit in the FHIR result: the ``oxygen-response`` parameter, its
Observation and the ``oxygen-trend`` parameter, valid R4B, in the requested pressure unit, with
the caution; checked on fixtures whose readings come from a known truth
(``tests.titration_reference``)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import orjson
import pytest

from service.assess.presentation import PressureUnit
from service.fhir.models import validate_resource
from service.physiology.oxygen_prediction import CAUTION
from service.physiology.units import kpa_from_mmhg
from service.runtime import Runtime
from tests.contract_shape import contract_problems

Json = dict[str, Any]
ROOT = Path(__file__).resolve().parents[2] / "fixtures"
MIXED = ROOT / "cases" / "titration" / "mixed-shunt-and-vq.bundle.json"
ICU = ROOT / "cases" / "titration" / "icu-fio2-steps.bundle.json"


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def _result(runtime: Runtime, path: Path, unit: PressureUnit | None = None) -> Json:
    result: Json = runtime.assess_bundle(orjson.loads(path.read_bytes()), pressure_unit=unit)
    return result


def _parameter(result: Json, name: str) -> Json | None:
    params = next(
        e["resource"] for e in result["entry"] if e["resource"]["resourceType"] == "Parameters"
    )
    return next((p for p in params["parameter"] if p["name"] == name), None)


def _parts(parameter: Json, name: str) -> list[Json]:
    return [p for p in parameter["part"] if p["name"] == name]


def _one(parameter: Json, name: str) -> Json:
    (part,) = _parts(parameter, name)
    return part


def _observation(result: Json, identifier: str) -> Json | None:
    return next(
        (e["resource"] for e in result["entry"] if e["resource"].get("id") == identifier), None
    )


def test_the_fit_is_in_the_parameters_with_its_ranges_points_and_predictions(
    runtime: Runtime,
) -> None:
    result = _result(runtime, MIXED)
    validate_resource(result)
    assert contract_problems(result) == []
    response = _parameter(result, "oxygen-response")
    assert response is not None
    assert _one(response, "model")["valueCode"] == "shunt-and-vq"
    # Truth 16 % and 60 mmHg (tests.titration_reference), whole-percent SpO2.
    assert _one(response, "shunt")["valueQuantity"]["value"] == pytest.approx(16.0, abs=3.0)
    assert _one(response, "vq-term")["valueQuantity"]["value"] == pytest.approx(60.0, abs=10.0)
    low = _one(response, "shunt-least")["valueQuantity"]["value"]
    high = _one(response, "shunt-most")["valueQuantity"]["value"]
    assert low <= _one(response, "shunt-low")["valueQuantity"]["value"] <= 16.5 <= high
    points = _parts(response, "point")
    assert len(points) == 6 and all(
        any(x["name"] == "observation" for x in p["part"]) for p in points
    )
    predictions = _parts(response, "prediction")
    fio2s = [next(x["valueDecimal"] for x in p["part"] if x["name"] == "fio2") for p in predictions]
    assert fio2s[0] == 0.21 and fio2s[-1] == 1.0 and fio2s == sorted(fio2s)
    targets = {
        next(x["valueCode"] for x in t["part"] if x["name"] == "band"): t
        for t in _parts(response, "target")
    }
    applies = {
        band: next(x["valueBoolean"] for x in t["part"] if x["name"] == "applies")
        for band, t in targets.items()
    }
    assert applies == {"94-98": True, "88-92": False}  # PaCO2 38, HCO3 24: no hypercapnic risk
    assert _one(response, "caution")["valueString"] == CAUTION


def test_the_observation_carries_the_fit_the_target_fio2_and_the_caution(runtime: Runtime) -> None:
    result = _result(runtime, MIXED)
    obs = _observation(result, "oxygen-response")
    assert obs is not None
    codes = {c["code"]["coding"][0]["code"]: c for c in obs["component"]}
    assert {
        "fitted-shunt",
        "fitted-shunt-range",
        "fitted-vq-term",
        "predicted-fio2-for-target",
    } <= set(codes)
    assert codes["fitted-shunt-range"]["valueRange"]["low"]["code"] == "%"
    target = codes["predicted-fio2-for-target"]["valueQuantity"]["value"]
    # The truth reaches 94 % at FiO2 0.316 (Brent's method on the independent model).
    assert target == pytest.approx(0.316, abs=0.03)
    assert obs["note"][0]["text"] == CAUTION
    assert len(obs["derivedFrom"]) >= 6
    mechanism = _observation(result, "mechanism-assessment")
    assert mechanism is not None
    # Entries reference each other by fullUrl (urn:uuid, resolvable inside the Bundle).
    (address,) = [e["fullUrl"] for e in result["entry"] if e["resource"] is obs]
    assert {"reference": address} in mechanism["derivedFrom"]


def test_pressures_follow_the_requested_unit(runtime: Runtime) -> None:
    mmhg = _parameter(_result(runtime, MIXED), "oxygen-response")
    kpa = _parameter(_result(runtime, MIXED, "kPa"), "oxygen-response")
    assert mmhg is not None and kpa is not None
    drop = _one(mmhg, "vq-term")["valueQuantity"]
    drop_kpa = _one(kpa, "vq-term")["valueQuantity"]
    assert drop_kpa["code"] == "kPa"
    assert drop_kpa["value"] == pytest.approx(kpa_from_mmhg(drop["value"]), abs=0.01)
    assert _one(kpa, "shunt")["valueQuantity"]["code"] == "%"


def test_an_unidentified_fit_reports_the_effective_shunt_and_why(runtime: Runtime) -> None:
    result = _result(runtime, ICU)
    validate_resource(result)
    response = _parameter(result, "oxygen-response")
    assert response is not None
    assert _one(response, "model")["valueCode"] == "effective-shunt"
    assert "not identified" in _one(response, "refusal")["valueString"]
    assert not _parts(response, "shunt") and _parts(response, "effective-shunt")
    obs = _observation(result, "oxygen-response")
    assert obs is not None
    codes = {c["code"]["coding"][0]["code"] for c in obs["component"]}
    assert "fitted-shunt" not in codes and "predicted-target-unreachable" in codes
    trend = _parameter(result, "oxygen-trend")
    assert trend is not None  # five gases
    measures = {
        next(x["valueCode"] for x in m["part"] if x["name"] == "code"): m
        for m in _parts(trend, "measure")
    }
    assert set(measures) == {
        "pf_ratio",
        "arterial_alveolar_ratio",
        "venous_admixture",
        "shunt",
        "vq_drop",
    }
    values = [p for p in measures["pf_ratio"]["part"] if p["name"] == "value"]
    assert len(values) == 5


def test_a_single_gas_has_no_oxygen_response_at_all(runtime: Runtime) -> None:
    result = _result(runtime, ROOT / "demo" / "altitude-visitor.bundle.json")
    assert _parameter(result, "oxygen-response") is None
    assert _parameter(result, "oxygen-trend") is None
    assert _observation(result, "oxygen-response") is None
