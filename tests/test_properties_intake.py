"""Property tests over the whole path: generated Bundles always give either a contract-shaped
result or a located OperationOutcome, never an exception, and the physiology invariants hold.
"""

from __future__ import annotations

from typing import Any

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from service.fhir.outcome import BundleError
from service.runtime import Runtime
from tests.contract_shape import contract_problems

RUNTIME = Runtime.load()
LOINC = "http://loinc.org"
# (code, plausible units) of the values the service reads (service/terminology/codes.py).
CODES = [
    ("2703-7", ["mm[Hg]", "kPa"]),
    ("2019-8", ["mm[Hg]", "kPa"]),
    ("2744-1", ["[pH]"]),
    ("1960-4", ["mmol/L"]),
    ("2708-6", ["%"]),
    ("59408-5", ["%"]),
    ("3150-0", ["%", "1"]),
    ("19994-3", ["%"]),
    ("3151-8", ["L/min"]),
    ("718-7", ["g/dL", "g/L"]),
    ("8310-5", ["Cel", "[degF]"]),
    ("76268-2", ["mm[Hg]", "kPa"]),
    ("2705-2", ["mm[Hg]"]),
    ("11556-8", ["mm[Hg]"]),
    ("20563-3", ["%"]),
]
times = st.sampled_from(
    ["2026-11-20T10:00:00Z", "2026-11-20T10:20:00Z", "2026-11-20T09:00:00Z", "2026-11-20"]
)
statuses = st.sampled_from(["final", "final", "amended", "preliminary", "entered-in-error"])


@st.composite
def observations(draw: st.DrawFn) -> dict[str, Any]:
    code, units = draw(st.sampled_from(CODES))
    value: Any = draw(
        st.one_of(
            st.floats(min_value=-50, max_value=2000, allow_nan=False),
            st.integers(min_value=0, max_value=800),
            st.just("high"),
            st.none(),
        )
    )
    quantity: dict[str, Any] = {"system": "http://unitsofmeasure.org"}
    if value is not None:
        quantity["value"] = value
    if draw(st.booleans()):
        quantity["code"] = draw(st.sampled_from([*units, "psi", ""]))
    obs: dict[str, Any] = {
        "resourceType": "Observation",
        "status": draw(statuses),
        "code": {"coding": [{"system": LOINC, "code": code}]},
        "valueQuantity": quantity,
    }
    if draw(st.integers(0, 9)):  # now and then no time at all
        obs["effectiveDateTime"] = draw(times)
    return obs


@st.composite
def bundles(draw: st.DrawFn) -> dict[str, Any]:
    resources: list[dict[str, Any]] = draw(st.lists(observations(), max_size=12))
    if draw(st.booleans()):
        resources.insert(0, {"resourceType": "Patient", "birthDate": "1960-02-29"})
    entry_type = draw(st.sampled_from(["collection", "searchset", "transaction", "batch"]))
    return {
        "resourceType": "Bundle",
        "type": entry_type,
        "entry": [{"resource": r} for r in resources],
    }


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(bundles())
def test_any_bundle_gives_a_result_or_a_located_outcome(bundle: dict[str, Any]) -> None:
    try:
        result = RUNTIME.assess_bundle(bundle)
    except BundleError as error:
        outcome = error.operation_outcome()
        issues = outcome["issue"]
        assert isinstance(issues, list) and issues
        assert all(i.get("expression") for i in issues)
        return
    assert contract_problems(result) == []
    params = result["entry"][1]["resource"]["parameter"]
    for p in params:
        if p["name"] in ("barometric-pressure", "inspired-po2", "water-vapour-pressure"):
            assert p["valueQuantity"]["value"] >= 0
    findings = [p for p in params if p["name"] == "finding"]
    errors = [f for f in findings if f["part"][1]["valueCode"] == "error"]
    grades = [p["part"][1]["valueCode"] for p in params if p["name"] == "mechanism"]
    if errors:
        assert "likely" not in grades


def _alveolar(fio2_percent: float, paco2: float) -> float:
    bundle = {
        "resourceType": "Bundle",
        "type": "collection",
        "entry": [
            {
                "resource": {
                    "resourceType": "Observation",
                    "status": "final",
                    "code": {"coding": [{"system": LOINC, "code": code}]},
                    "effectiveDateTime": "2026-11-20T10:00:00Z",
                    "valueQuantity": {"value": value, "code": unit},
                }
            }
            for code, value, unit in (
                ("3150-0", fio2_percent, "%"),
                ("2019-8", paco2, "mm[Hg]"),
                ("2703-7", 60.0, "mm[Hg]"),
            )
        ],
    }
    params = RUNTIME.assess_bundle(bundle)["entry"][1]["resource"]["parameter"]
    value: float = next(p for p in params if p["name"] == "alveolar-po2")["valueQuantity"]["value"]
    return value


@settings(max_examples=40, deadline=None)
@given(
    st.floats(min_value=21, max_value=100),
    st.floats(min_value=21, max_value=100),
    st.floats(min_value=15, max_value=90),
)
def test_a_higher_fio2_never_lowers_the_alveolar_po2(f1: float, f2: float, paco2: float) -> None:
    low, high = sorted((f1, f2))
    assert _alveolar(high, paco2) >= _alveolar(low, paco2) - 0.05  # display rounding
