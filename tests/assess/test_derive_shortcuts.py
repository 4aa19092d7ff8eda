"""The deriving and pairing path's shortcuts give what the long way gives.

Each shortcut of the hot path (a plan looked up once, a value accepted inside its range
without asking the catalogue, one value of a kind paired without the general search, one
normal A-a gradient computed alone, the PaCO2 anchors' pressures worked out at import, the
representative inputs read without the scenarios) is checked here against the general
computation it stands for, and where there is one, against the published number.
"""

from __future__ import annotations

import math
from datetime import timedelta
from functools import cache
from pathlib import Path
from typing import Any

import orjson
import pytest

from service.assess import derivation, normals
from service.assess.assess import ALVEOLAR_TOLERANCE, windows
from service.assess.derivation import Computed, DerivedTable, FactValue
from service.assess.derive import GasFacts, derive_gas_facts
from service.assess.pairing import _WINDOW_OF, Windows, _nearest, pair_gases
from service.assess.uncertainty import input_ranges, representative_changes
from service.config import Settings
from service.engine.facts import FactKind, FactSpec
from service.fhir.extract import read_bundle
from service.intake.model import Quantity as Q
from service.intake.model import Source
from service.physiology import reference as ref
from service.physiology.atmosphere import barometric_pressure_west_mmhg
from service.runtime import Runtime

from .builders import T0, m

FIXTURES = sorted((Path(__file__).resolve().parents[2] / "fixtures").rglob("*.bundle.json"))


def _gases(path: Path, settings: Settings) -> list[GasFacts]:
    data = read_bundle(orjson.loads(path.read_bytes()))
    today = T0.date()
    return [
        derive_gas_facts(g, patient=data.patient, settings=settings, today=today)
        for g in pair_gases(data, windows=windows(settings)).gases
    ]


# --- The representative inputs without the scenarios ------------------------------------------


@cache
def _rule_set_tolerance() -> float:
    parameter = Runtime.load().ruleset.parameters.get(ALVEOLAR_TOLERANCE)
    return parameter.value if parameter is not None else 0.0


@pytest.mark.parametrize("path", FIXTURES, ids=lambda p: p.name)
def test_the_representative_changes_are_the_ranges_representative(path: Path) -> None:
    settings = Settings()
    tolerances = {0.0, 5.0, _rule_set_tolerance()}
    for gas in _gases(path, settings):
        for tolerance in sorted(tolerances):
            full = input_ranges(gas, tolerance_mmhg=tolerance, settings=settings)
            alone = representative_changes(gas, tolerance_mmhg=tolerance, settings=settings)
            assert list(alone.items()) == list(full.representative.items())


# --- A value inside its range is accepted without asking the catalogue -----------------------

_A = FactSpec("a", FactKind.QUANTITY, "1", "an input", 0.0, 100.0, decimals=2)


def _one_entry(returned: object, *, unit: str = "1") -> tuple[DerivedTable, dict[str, FactSpec]]:
    table = DerivedTable()

    @table.quantity("v", unit, (0.0, 10.0), 2, "returns what the test gives it")
    def v(*, a: float) -> Any:
        del a
        return returned

    return table, {"a": _A, "v": table.facts[0].spec}


@pytest.mark.parametrize("value", [0.0, 10.0, 5.5, 0, 10])
def test_a_value_at_or_inside_its_limits_is_accepted_as_a_float(value: float) -> None:
    table, specs = _one_entry(value)
    facts: dict[str, FactValue] = {"a": 1.0}
    assert derivation.compute_derived(table.facts, facts, {}, specs, Settings()) == ({}, [])
    assert facts["v"] == value and type(facts["v"]) is float


@pytest.mark.parametrize(
    ("value", "problem"),
    [
        (-1e-9, "outside the accepted range 0 to 10 1"),
        (10.000001, "outside the accepted range 0 to 10 1"),
        (math.nan, "expected a finite number"),
        (math.inf, "expected a finite number"),
        (-math.inf, "expected a finite number"),
    ],
)
def test_a_value_outside_its_limits_is_the_catalogues_problem(value: float, problem: str) -> None:
    table, specs = _one_entry(value)
    facts: dict[str, FactValue] = {"a": 1.0}
    _, problems = derivation.compute_derived(table.facts, facts, {}, specs, Settings())
    assert problems == [f"v: {problem}; not used"]
    assert "v" not in facts


def test_a_percentage_is_checked_in_percent() -> None:
    # The catalogue presents fractions as %: 0.05 comes out as 5 %, inside 0-10 %; 0.2 as
    # 20 %, outside (a check on the fraction would accept both).
    for fraction, kept in ((0.05, True), (0.2, False)):
        table, specs = _one_entry(fraction, unit="%")
        facts: dict[str, FactValue] = {"a": 1.0}
        derivation.compute_derived(table.facts, facts, {}, specs, Settings())
        assert ("v" in facts) is kept
        if kept:
            assert facts["v"] == pytest.approx(5.0)


def _flag(returned: object) -> derivation.DerivedFact:
    table = DerivedTable()

    @table.flag("f", "returns what the test gives it")
    def f(*, a: float) -> Any:
        del a
        return returned

    return table.facts[0]


@pytest.mark.parametrize(
    ("returned", "problem"), [(True, None), (False, None), (1.0, "expected true or false")]
)
def test_a_flag_takes_only_a_boolean(returned: object, problem: str | None) -> None:
    entry = _flag(returned)
    facts: dict[str, FactValue] = {"a": 1.0}
    _, problems = derivation.compute_derived(
        [entry], facts, {}, {"a": _A, "f": entry.spec}, Settings()
    )
    assert problems == ([] if problem is None else [f"f: {problem}; not used"])
    assert facts.get("f") == (returned if problem is None else None)


def test_a_quantity_must_not_be_a_boolean() -> None:
    table, specs = _one_entry(True)
    with pytest.raises(AssertionError):
        derivation.compute_derived(table.facts, {"a": 1.0}, {}, specs, Settings())


# --- One value of a kind is paired as the general search pairs it ----------------------------

_LIMIT = timedelta(minutes=30)


@pytest.mark.parametrize("minutes", [None, -31.0, -30.0, -5.0, 0.0, 5.0, 30.0, 31.0])
@pytest.mark.parametrize("anchored", [True, False])
@pytest.mark.parametrize("limit", [_LIMIT, None])
def test_one_candidate_is_chosen_as_the_general_search_chooses_it(
    minutes: float | None, anchored: bool, limit: timedelta | None
) -> None:
    value = m(Q.HAEMOGLOBIN, 14.0, minutes)
    anchor = T0 if anchored else None
    # Two of the same value take the general search; one takes the shortcut.
    assert _nearest([value], anchor, limit) == _nearest([value, value], anchor, limit)


def test_one_candidate_within_the_window_out_of_it_and_untimed() -> None:
    inside, outside, untimed = m(Q.HAEMOGLOBIN, 14.0, 20.0), m(Q.HAEMOGLOBIN, 14.0, 40.0), None
    assert _nearest([inside], T0, _LIMIT) == (inside, None, False)
    assert _nearest([outside], T0, _LIMIT) == (None, outside, False)
    untimed = m(Q.HAEMOGLOBIN, 14.0, None)
    assert _nearest([untimed], T0, _LIMIT) == (untimed, None, True)


def test_each_kind_of_value_has_the_window_of_its_first_group() -> None:
    w = windows(Settings())
    expected: dict[Q, timedelta | None] = {
        Q.ARTERIAL_PCO2: w.same_sample,
        Q.ARTERIAL_O2HB: w.same_sample,
        Q.SPO2: w.context,
        Q.FIO2: w.context,  # a setting is context too; its look-back is Windows.setting
        Q.OXYGEN_DEVICE: w.context,
        Q.BAROMETRIC_PRESSURE: w.context,
        Q.HAEMOGLOBIN: w.haemoglobin,
        Q.CARBOXYHAEMOGLOBIN: w.dyshaemoglobins,
        Q.BODY_TEMPERATURE: w.temperature,
        Q.DLCO: w.lung_function,
        Q.SPO2_EXERTIONAL_NADIR: w.lung_function,
        Q.ALTITUDE: None,
        Q.ALTITUDE_RESIDENCE: None,
        Q.ARTERIAL_PO2: None,
    }
    for quantity, window in expected.items():
        assert w.limit(quantity) == window, quantity
    assert set(_WINDOW_OF.values()) == {
        "same_sample",
        "context",
        "haemoglobin",
        "dyshaemoglobins",
        "temperature",
        "lung_function",
    }


def test_the_windows_are_the_settings_own_whatever_was_asked_before() -> None:
    wide, narrow = Settings(same_sample_minutes=30), Settings(same_sample_minutes=5)
    assert windows(wide) is windows(wide)
    assert windows(narrow).same_sample == timedelta(minutes=5)
    assert windows(wide).same_sample == timedelta(minutes=30)
    assert isinstance(windows(wide), Windows)


# --- One normal A-a gradient value computed alone -------------------------------------------


@pytest.mark.parametrize("age", [10.0, 18.0, 25.0, 40.0, 62.0, 74.0, 75.0, 90.0])
@pytest.mark.parametrize("alveolar", [-5.0, 0.0, 45.0, 101.0, 101.8, 150.0, 400.0, 663.0])
def test_each_normal_gradient_alone_is_the_pairs(age: float, alveolar: float) -> None:
    pair = ref.normal_aa_gradient(age_years=age, alveolar_po2_mmhg=alveolar)
    for limit, value in ((False, pair.expected), (True, pair.upper_limit)):
        alone = ref.normal_aa_gradient_mmhg(age_years=age, alveolar_po2_mmhg=alveolar, limit=limit)
        assert alone == value


def test_the_reference_alveolar_po2_is_the_same_number_every_time() -> None:
    # Alveolar gas equation at 760 mmHg, FiO2 0.21, PaCO2 40, R 0.8, PH2O 47.07 mmHg at 37 °C
    # (IAPWS-IF97): about 101.8 mmHg; cached per quotient, so R = 1 gives its own value.
    assert ref.reference_alveolar_po2_mmhg() == pytest.approx(101.8, abs=0.05)
    assert ref.reference_alveolar_po2_mmhg() == ref.reference_alveolar_po2_mmhg()
    at_one = ref.reference_alveolar_po2_mmhg(respiratory_quotient=1.0)
    # With R = 1: PAO2 = 0.21 × (760 − 47.07) − 40 = 109.7 mmHg.
    assert at_one == pytest.approx(0.21 * (760.0 - 47.07) - 40.0, abs=0.05)


# --- The PaCO2 anchors, worked out at import ----------------------------------------------------


_RESIDENT, _VISITOR = ref.RESIDENT_PACO2, ref.VISITOR_PACO2


def _between(high: ref.PaCO2Anchor, low: ref.PaCO2Anchor) -> str:
    return f"interpolated between {high.source} and {low.source}"


@pytest.mark.parametrize(
    ("residence", "altitude_m", "mean", "upper", "method"),
    [
        # Sea level: 40 mmHg, upper 45 (reference range 35-45 mmHg, common practice).
        (ref.Residence.RESIDENT, 0.0, 40.0, 45.0, _RESIDENT[0].source),
        (ref.Residence.VISITOR, 0.0, 40.0, 45.0, _VISITOR[0].source),
        # Mexico City residents, 2,240 m: 30.2 ± 3.4 mmHg (Cid-Juárez et al. 2023); at an
        # anchor's own pressure the segment that ends there is used.
        (
            ref.Residence.RESIDENT,
            2240.0,
            30.2,
            30.2 + 1.645 * 3.4,
            _between(_RESIDENT[0], _RESIDENT[1]),
        ),
        # Cusco residents, 3,350 m: 30.6, 97.5th centile 36.1 (Pereira-Victorio 2014).
        (ref.Residence.RESIDENT, 3350.0, 30.6, 36.1, _between(_RESIDENT[1], _RESIDENT[2])),
        # Visitors: little hyperventilation below ~3,000 m (Rahn & Otis 1949).
        (ref.Residence.VISITOR, 3000.0, 40.0, 45.0, _between(_VISITOR[0], _VISITOR[1])),
        # Climbers at 8,400 m: 13.3 mmHg, up to 15.7 (Grocott et al. 2009).
        (ref.Residence.VISITOR, 8400.0, 13.3, 15.7, _between(_VISITOR[1], _VISITOR[2])),
    ],
)
def test_at_each_published_anchor_the_expected_paco2_is_the_published_one(
    residence: ref.Residence, altitude_m: float, mean: float, upper: float, method: str
) -> None:
    pb = barometric_pressure_west_mmhg(altitude_m=altitude_m)
    found = ref.expected_paco2(barometric_mmhg=pb, residence=residence)
    assert found.mean_mmhg == pytest.approx(mean, abs=1e-9)
    assert found.upper_limit_mmhg == pytest.approx(upper, abs=1e-9)
    assert found.method == method


def test_between_anchors_the_expected_paco2_is_linear_in_pressure() -> None:
    # Halfway in pressure between sea level (40/45) and Mexico City (30.2/35.79): halfway in
    # value, and the method names both sources.
    high = barometric_pressure_west_mmhg(altitude_m=0.0)
    low = barometric_pressure_west_mmhg(altitude_m=2240.0)
    found = ref.expected_paco2(barometric_mmhg=(high + low) / 2, residence=ref.Residence.RESIDENT)
    assert found.mean_mmhg == pytest.approx((40.0 + 30.2) / 2, abs=1e-9)
    assert found.upper_limit_mmhg == pytest.approx((45.0 + 30.2 + 1.645 * 3.4) / 2, abs=1e-9)
    assert found.method.startswith("interpolated between reference range 35–45 mmHg")
    assert "Cid-Juárez" in found.method
    # Beyond the last anchor the end value is held, with its own source.
    top = ref.expected_paco2(barometric_mmhg=250.0, residence=ref.Residence.VISITOR)
    assert (top.mean_mmhg, top.upper_limit_mmhg) == (13.3, 15.7)
    assert top.method.startswith("Grocott")
    above = ref.expected_paco2(barometric_mmhg=800.0, residence=ref.Residence.RESIDENT)
    assert (above.mean_mmhg, above.upper_limit_mmhg) == (40.0, 45.0)


# --- The observations a derived value was computed from, without repeats -------------------


def test_two_facts_from_one_observation_name_it_once() -> None:
    table = DerivedTable()

    @table.quantity("w", "1", (0.0, 100.0), 2, "a plus b")
    def w(*, a: float, b: float) -> float:
        return a + b

    b_spec = FactSpec("b", FactKind.QUANTITY, "1", "an input", 0.0, 100.0, decimals=2)
    specs = {"a": _A, "b": b_spec, "w": table.facts[0].spec}
    one = Source("Observation/panel", "Bundle.entry[0].resource")
    same = Source("Observation/panel", "Bundle.entry[0].resource")  # equal, not identical
    other = Source("Observation/other", "Bundle.entry[1].resource")
    for a_from, b_from, expected in (
        ((one,), (one,), (one,)),
        ((one,), (same,), (one,)),
        ((one,), (other,), (one, other)),
        ((one, other), (same,), (one, other)),
    ):
        facts: dict[str, FactValue] = {"a": 1.0, "b": 2.0}
        sources: dict[str, tuple[Source, ...]] = {"a": a_from, "b": b_from}
        derivation.compute_derived(table.facts, facts, sources, specs, Settings())
        assert sources["w"] == expected
        assert sources["w"][0] is one


def test_the_expected_gradient_fact_is_the_expected_not_the_limit() -> None:
    # At the reference alveolar PO2 (sea level, air, PaCO2 40) the expected A-a gradient is
    # PAO2_ref minus the PaO2 expected for age (Cerveri 1995: 143.6 - 0.39 age - 0.56 BMI
    # - 0.57 PaCO2, BMI 25); the upper limit uses the 5th centile, 1.645 x SEE 7.48 lower.
    alveolar = ref.reference_alveolar_po2_mmhg()
    mean = 143.6 - 0.39 * 50.0 - 0.56 * 25.0 - 0.57 * 40.0
    settings = Settings()
    expected = normals.aa_gradient_expected.compute(
        age=50.0, alveolar_po2=alveolar, settings=settings
    )
    limit = normals.aa_gradient_upper_limit.compute(
        age=50.0, alveolar_po2=alveolar, settings=settings
    )
    assert expected == pytest.approx(alveolar - mean, abs=1e-9)
    assert isinstance(limit, Computed)
    assert limit.value == pytest.approx(alveolar - (mean - 1.645 * 7.48), abs=1e-9)
