"""Whole-path checks (FHIR Bundle in, result Bundle out) against published measurements.

Each case rebuilds a published dataset as an invented FHIR Bundle and compares the numbers in
the result with the paper's; the source is named beside each assertion.
"""

from __future__ import annotations

from typing import Any

import pytest

from service.runtime import Runtime

LOINC = "http://loinc.org"
TIME = "2026-11-20T10:00:00+00:00"


def _obs(code: str, value: float, unit: str) -> dict[str, Any]:
    return {
        "resourceType": "Observation",
        "id": f"o-{code}",
        "status": "final",
        "code": {"coding": [{"system": LOINC, "code": code}]},
        "effectiveDateTime": TIME,
        "valueQuantity": {
            "value": value,
            "unit": unit,
            "system": "http://unitsofmeasure.org",
            "code": unit,
        },
    }


def _bundle(birth: str, *observations: dict[str, Any]) -> dict[str, Any]:
    patient = {"resourceType": "Patient", "id": "p", "birthDate": birth}
    return {
        "resourceType": "Bundle",
        "type": "collection",
        "entry": [{"resource": r} for r in (patient, *observations)],
    }


def _quantities(result: dict[str, Any]) -> dict[str, float]:
    params = result["entry"][1]["resource"]["parameter"]
    return {p["name"]: p["valueQuantity"]["value"] for p in params if "valueQuantity" in p}


def _grades(result: dict[str, Any]) -> dict[str, str]:
    params = result["entry"][1]["resource"]["parameter"]
    return {
        p["part"][0]["valueCode"]: p["part"][1]["valueCode"]
        for p in params
        if p["name"] == "mechanism"
    }


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def test_everest_8400_m_gas_matches_grocott_2009(runtime: Runtime) -> None:
    # Grocott MPW et al., N Engl J Med 2009;360:140 (abstract): at 8400 m, PB 272 mmHg,
    # mean PaO2 24.6, PaCO2 13.3 mmHg, mean calculated A-a 5.4 mmHg. Our
    # recomputation gives 6.0–6.7 (R, PH2O unknown in the paper): ±1.5 mmHg allowed.
    result = runtime.assess_bundle(
        _bundle(
            "1985-01-01",
            _obs("76268-2", 272, "mm[Hg]"),
            _obs("3150-0", 21, "%"),
            _obs("2703-7", 24.6, "mm[Hg]"),
            _obs("2019-8", 13.3, "mm[Hg]"),
        )
    )
    q = _quantities(result)
    assert q["aa-gradient"] == pytest.approx(5.4, abs=1.5)
    grades = _grades(result)
    # Wagner 2015 Table 1: altitude is inspiratory hypoxia with a normal A-a gradient.
    assert grades["low-inspired-oxygen"] == "likely"
    assert grades["hypoventilation"] == "unlikely"


def test_healthy_adult_on_pure_oxygen_matches_toffaletti_2026(runtime: Runtime) -> None:
    # Toffaletti & Zavorsky, Physiol Rep 2026 (abstract): healthy 51-year-old, FiO2 1.0,
    # PB 752, PaO2 587, PaCO2 38, SaO2 0.993, Hb 15.2 g/dL: shunt 2.8–5.2 % by four methods.
    # [calc]: PAO2 = 752 − 47 − 38 = 667, A-a 80 (PH2O 47.1 here: ±0.3).
    result = runtime.assess_bundle(
        _bundle(
            "1975-06-01",
            _obs("76268-2", 752, "mm[Hg]"),
            _obs("3150-0", 100, "%"),
            _obs("2703-7", 587, "mm[Hg]"),
            _obs("2019-8", 38, "mm[Hg]"),
            _obs("2708-6", 99.3, "%"),
            _obs("718-7", 15.2, "g/dL"),
        )
    )
    q = _quantities(result)
    assert q["aa-gradient"] == pytest.approx(80.0, abs=0.3)
    assert 2.8 <= q["shunt-fraction"] <= 5.2
    # Upsala J Med Sci (abstract): on 100 % O2 a 50-year-old's normal A-a is 60–108 mmHg, so
    # 80 is no defect: a/A 0.88 and P/F 587 are normal.
    assert _grades(result)["shunt"] == "unlikely"


def test_kpa_feed_gives_the_same_numbers_as_mmhg(runtime: Runtime) -> None:
    # UCUM: 1 mm[Hg] = 0.1333220 kPa. The same gas sent in kPa must give the same A-a.
    def gas(unit: str, factor: float) -> dict[str, Any]:
        return _bundle(
            "1980-01-01",
            _obs("3150-0", 21, "%"),
            _obs("2703-7", 70 * factor, unit),
            _obs("2019-8", 40 * factor, unit),
        )

    mmhg = _quantities(runtime.assess_bundle(gas("mm[Hg]", 1.0)))
    kpa = _quantities(runtime.assess_bundle(gas("kPa", 0.1333220)))
    assert kpa["aa-gradient"] == pytest.approx(mmhg["aa-gradient"], abs=0.05)
