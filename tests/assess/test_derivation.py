"""The derived-fact table is the one owner of each derived fact.

These tests fail if a second copy appears: a catalogue entry for a derived fact that is not
the table's own, inputs listed by hand that drift from what the computation reads, a
computation that reaches for a fact it did not declare, or an entry that reads a fact before
it is derived.
"""

from __future__ import annotations

import ast
import inspect
import textwrap
from datetime import date
from pathlib import Path

import orjson
import pytest

from service.assess import derivation
from service.assess.assess import windows
from service.assess.catalogue import DEFAULT_CATALOGUE, MEASURED_FACTS
from service.assess.derivation import DerivedFact, DerivedTable, FactValue, check_order
from service.assess.derive import GasFacts, derive_again, derive_gas_facts
from service.assess.derived import DERIVED_FACTS
from service.assess.pairing import pair_gases
from service.config import Settings
from service.engine.data_requests import DataRequests
from service.engine.facts import FactKind, FactOrigin, FactSpec
from service.fhir.extract import read_bundle
from service.intake.model import Quantity as Q
from service.intake.model import Source

from .builders import intake, m

ENTRIES = {entry.name: entry for entry in DERIVED_FACTS}


def test_every_derived_fact_of_the_catalogue_is_the_tables_own_entry() -> None:
    derived = {n for n, s in DEFAULT_CATALOGUE.items() if s.origin is FactOrigin.DERIVED}
    assert derived == set(ENTRIES)
    for name, entry in ENTRIES.items():
        # The very object: a hand-written copy with other inputs would not be.
        assert DEFAULT_CATALOGUE[name] is entry.spec, name


@pytest.mark.parametrize("name", sorted(ENTRIES))
def test_declared_inputs_are_exactly_what_the_computation_reads(name: str) -> None:
    entry = ENTRIES[name]
    function = entry.compute
    parameters = [p for p in inspect.signature(function).parameters if p != "settings"]
    assert tuple(parameters) == entry.inputs + entry.optional
    tree = ast.parse(textwrap.dedent(inspect.getsource(function)))
    (definition,) = [n for n in tree.body if isinstance(n, ast.FunctionDef)]
    used = {
        node.id
        for statement in definition.body
        for node in ast.walk(statement)
        if isinstance(node, ast.Name)
    }
    # Every declared input is read (or, where documented, deleted as needed-but-unused) ...
    assert set(parameters) <= used, name
    # ... and no other fact is reached for: a fact name in the body must be a parameter.
    assert not (used & set(DEFAULT_CATALOGUE)) - set(parameters), name


def test_the_table_reads_no_fact_before_it_is_derived() -> None:
    known = [
        spec.name for spec in DEFAULT_CATALOGUE.values() if spec.origin is not FactOrigin.DERIVED
    ]
    check_order(DERIVED_FACTS, known)  # the catalogue's own import does this too
    table = DerivedTable()

    @table.quantity("late", "1", (0.0, 1.0), 2, "reads a fact derived after it")
    def late(*, alveolar_po2: float) -> float:
        return alveolar_po2

    with pytest.raises(ValueError, match="late reads alveolar_po2 before it is derived"):
        check_order(table.facts, [m.name for m in MEASURED_FACTS])


def test_a_computation_takes_keyword_only_facts_and_none_defaults() -> None:
    table = DerivedTable()
    with pytest.raises(TypeError, match="keyword-only"):
        table.quantity("x", "1", (0.0, 1.0), 2, "x")(lambda fio2: fio2)

    def defaulted(*, fio2: float = 0.21) -> float:
        return fio2

    with pytest.raises(TypeError, match="defaults to None"):
        table.quantity("y", "1", (0.0, 1.0), 2, "y")(defaulted)


def _needs(name: str) -> set[str]:
    """Every fact a catalogue entry reads, through the derived facts it reads."""
    spec = DEFAULT_CATALOGUE[name]
    found = set(spec.inputs)
    for input_name in spec.inputs:
        found |= _needs(input_name)
    return found


@pytest.mark.parametrize(
    ("fact", "fio2"),
    [
        # 2.0 (rules/CHANGELOG.md, "venous admixture labelled so below FiO2 0.9"): the shunt
        # fraction is the venous admixture on near-pure oxygen and reads it, not the Hb
        # directly, so the Hb is asked for through the admixture, on an FiO2 where the shunt
        # fraction is defined.
        ("shunt_fraction", 1.0),
        ("venous_admixture", 0.6),
        ("venous_admixture_least", 0.6),
        ("venous_admixture_most", 0.6),
    ],
)
def test_an_admixture_without_haemoglobin_asks_for_haemoglobin(fact: str, fio2: float) -> None:
    # The shunt equation needs the haemoglobin (the content of end-capillary and arterial
    # blood: 1.34 x Hb x S + 0.003 x PO2, common practice); a data request must name it, not
    # the admixture or the shunt fraction (numbers nobody can send).
    assert "haemoglobin" in _needs(fact)
    known = {
        "arterial_po2": 60.0,
        "arterial_pco2": 40.0,
        "fio2": fio2,
        "barometric_pressure": 760.0,
        "water_vapour_pressure": 47.1,
        "alveolar_po2": 380.0,
    }
    requests = DataRequests(known, DEFAULT_CATALOGUE)
    requests.ask(fact, "r@1")
    assert [(r.fact, r.needed_for) for r in requests.collected()] == [("haemoglobin", (fact,))]


def test_a_value_outside_its_range_is_a_problem_and_nothing_is_computed_from_it() -> None:
    facts: dict[str, FactValue] = {"arterial_po2": 100.0, "alveolar_po2": 1.0}
    sources: dict[str, tuple[Source, ...]] = {}
    ratio = ENTRIES["a_a_ratio"]
    filed, problems = derivation.compute_derived(
        [ratio], facts, sources, DEFAULT_CATALOGUE, Settings()
    )
    assert "a_a_ratio" not in facts and filed == {}
    assert problems == ["a_a_ratio: outside the accepted range 0 to 5 1; not used"]


# Deriving only what a scenario's changes touch (``derive_changed``) against deriving
# everything again: the same facts, values, types and order, on every fixture's gases. The
# changes are the inputs a scenario varies (``service.assess.uncertainty``): FiO2, pressure,
# age, residence, and the flag saying the FiO2 was raised by the PaO2.
FIXTURES = sorted((Path(__file__).resolve().parents[2] / "fixtures").rglob("*.bundle.json"))
CHANGES: list[dict[str, FactValue]] = [
    {},
    {"altitude_residence": "resident"},
    {"altitude_residence": "visitor"},
    {"fio2": 0.21},
    {"fio2": 0.6, "fio2_raised_by_pao2": True},
    {"fio2": 1.0},
    {"barometric_pressure": 560.0},
    {"barometric_pressure": 760.0, "altitude_residence": "visitor"},
    {"age": 30.0},
    {"age": 85.0, "fio2": 0.35, "barometric_pressure": 640.0},
    {"arterial_pco2": 80.0},
    {"haemoglobin": 4.0},
    {"fio2": 3.0},  # refused by the table's checks: everything read from it goes
]


def _again_in_full(gas: GasFacts, changes: dict[str, FactValue]) -> dict[str, FactValue]:
    facts = {**gas.measured, **changes}
    derivation.compute_derived(DERIVED_FACTS, facts, {}, DEFAULT_CATALOGUE, Settings())
    return facts


def _gases(path: Path, settings: Settings) -> list[GasFacts]:
    data = read_bundle(orjson.loads(path.read_bytes()))
    pairing = pair_gases(data, windows=windows(settings))
    today = date(2026, 12, 1)
    return [
        derive_gas_facts(g, patient=data.patient, settings=settings, today=today)
        for g in pairing.gases
    ]


@pytest.mark.parametrize("path", FIXTURES, ids=lambda p: p.name)
def test_deriving_only_what_changes_touch_is_deriving_everything_again(path: Path) -> None:
    settings = Settings()
    for gas in _gases(path, settings):
        assert gas.base is not None
        for changes in CHANGES:
            full = _again_in_full(gas, changes)
            part = derive_again(gas, changes, settings=settings)
            assert list(part.items()) == list(full.items()), (path.name, changes)
            assert [type(v) for v in part.values()] == [type(v) for v in full.values()]


def test_derived_facts_reused_only_for_the_settings_they_were_derived_with() -> None:
    # The alveolar gas equation reads the respiratory quotient from the settings: a scenario
    # derived with another quotient must compute the alveolar PO2 again, not reuse it.
    path = next(p for p in FIXTURES if p.name == "altitude-visitor.bundle.json")
    (gas, *_) = _gases(path, Settings())
    other = Settings(respiratory_quotient=0.9)
    facts = derive_again(gas, {"altitude_residence": "resident"}, settings=other)
    assert facts["alveolar_po2"] != gas.facts["alveolar_po2"]
    full = {**gas.measured, "altitude_residence": "resident"}
    derivation.compute_derived(DERIVED_FACTS, full, {}, DEFAULT_CATALOGUE, other)
    assert facts == full


def test_a_changed_fact_that_equals_the_measured_one_changes_nothing() -> None:
    # The same value is no change; a number of another type (True against 1.0) or of the other
    # sign of zero is.
    assert derivation._same(0.21, 0.21) and derivation._same("resident", "resident")
    assert not derivation._same(True, 1.0) and not derivation._same(0.0, -0.0)
    assert not derivation._same(float("nan"), float("nan"))


def test_a_scenario_asked_for_again_is_the_same_facts_in_a_fresh_mapping() -> None:
    path = next(p for p in FIXTURES if p.name == "altitude-visitor.bundle.json")
    (gas, *_) = _gases(path, Settings())
    settings = gas.base.settings if gas.base is not None else Settings()
    first = derive_again(gas, {"altitude_residence": "visitor"}, settings=settings)
    first["paco2_expected"] = -1.0  # a caller's edit must not reach the next caller
    second = derive_again(gas, {"altitude_residence": "visitor"}, settings=settings)
    assert second == _again_in_full(gas, {"altitude_residence": "visitor"})
    # True and 1.0 are equal in Python but not the same change.
    flag = derive_again(gas, {"fio2_raised_by_pao2": True}, settings=settings)
    number = derive_again(gas, {"fio2_raised_by_pao2": 1.0}, settings=settings)
    assert type(flag["fio2_raised_by_pao2"]) is bool
    assert type(number["fio2_raised_by_pao2"]) is float


# A small table of our own, to watch what ``derive_changed`` computes. Facts a and b are
# measured; w needs both, x reads a, y reads b, z reads x.
_SMALL_SPECS = {
    name: FactSpec(name, FactKind.QUANTITY, "1", name, 0.0, 100.0) for name in ("a", "b")
}


def _small_table(calls: list[str]) -> tuple[DerivedFact, ...]:
    table = DerivedTable()

    @table.quantity("w", "1", (0.0, 100.0), 2, "a plus b")
    def w(*, a: float, b: float) -> float:
        calls.append("w")
        return a + b

    @table.quantity("x", "1", (0.0, 100.0), 2, "twice a")
    def x(*, a: float) -> float:
        calls.append("x")
        return 2.0 * a

    @table.quantity("y", "1", (0.0, 100.0), 2, "twice b")
    def y(*, b: float) -> float:
        calls.append("y")
        return 2.0 * b

    @table.quantity("z", "1", (0.0, 100.0), 2, "x plus one")
    def z(*, x: float) -> float:
        calls.append("z")
        return x + 1.0

    return tuple(table.facts)


def test_a_change_computes_again_only_what_reads_it_directly_or_through_another() -> None:
    calls: list[str] = []
    entries = _small_table(calls)
    specs = {**_SMALL_SPECS, **{e.name: e.spec for e in entries}}
    measured: dict[str, FactValue] = {"a": 1.0, "b": 2.0}
    base = dict(measured)
    derivation.compute_derived(entries, base, {}, specs, Settings())
    derived = {k: v for k, v in base.items() if k not in measured}
    calls.clear()
    again = derivation.derive_changed(entries, measured, derived, {"a": 3.0}, specs, Settings())
    assert calls == ["w", "x", "z"]  # y reads only b, which did not change
    assert again == {"a": 3.0, "b": 2.0, "w": 5.0, "x": 6.0, "y": 4.0, "z": 7.0}
    calls.clear()
    same = derivation.derive_changed(entries, measured, derived, {"a": 1.0}, specs, Settings())
    assert calls == [] and same == base  # the measured value again is no change


def test_a_table_with_two_entries_of_one_name_is_derived_again_in_full() -> None:
    # The second "x" has nothing to say here, so the first one's value stands: reusing the
    # kept value after computing the first again would be wrong, so nothing is reused.
    table = DerivedTable()

    @table.quantity("x", "1", (0.0, 100.0), 2, "twice a")
    def first(*, a: float) -> float:
        return 2.0 * a

    @table.quantity("x", "1", (0.0, 100.0), 2, "not applicable")
    def second(*, b: float) -> float | None:
        return None

    entries = tuple(table.facts)
    specs = {**_SMALL_SPECS, "x": entries[0].spec}
    measured: dict[str, FactValue] = {"a": 1.0, "b": 2.0}
    again = derivation.derive_changed(entries, measured, {"x": 2.0}, {"a": 3.0}, specs, Settings())
    assert again == {"a": 3.0, "b": 2.0, "x": 6.0}


def test_a_table_is_planned_once_and_a_list_every_time() -> None:
    plan = derivation._plan_of(DERIVED_FACTS, DEFAULT_CATALOGUE)
    assert derivation._plan_of(DERIVED_FACTS, DEFAULT_CATALOGUE) is plan
    listed = list(DERIVED_FACTS[:3])
    first = derivation._plan_of(listed, DEFAULT_CATALOGUE)
    listed.pop()  # a list may change between calls: its plan is never kept
    assert len(derivation._plan_of(listed, DEFAULT_CATALOGUE).steps) == 2
    assert len(first.steps) == 3


def test_a_fact_read_but_missing_from_the_catalogue_is_an_error_only_when_known() -> None:
    calls: list[str] = []
    entries = _small_table(calls)
    specs = {e.name: e.spec for e in entries}  # no a, no b
    # Neither a nor b known: nothing is read, nothing is wrong (and nothing is computed).
    assert derivation.compute_derived(entries, {}, {}, specs, Settings()) == ({}, [])
    with pytest.raises(KeyError, match="'a'"):  # the first one read, as a lookup would say
        derivation.compute_derived(entries, {"a": 1.0, "b": 2.0}, {}, specs, Settings())


def test_a_derived_value_names_the_observations_it_was_computed_from() -> None:
    # The alveolar gas equation reads the PaCO2 and the FiO2 (and the pressure): the value
    # filed in the result is derived from those Observations, not from the PaO2.
    paco2, fio2, pao2 = m(Q.ARTERIAL_PCO2, 40.0), m(Q.FIO2, 0.21), m(Q.ARTERIAL_PO2, 90.0)
    data = intake(pao2, paco2, fio2)
    settings = Settings(site_altitude_m=None)
    (gas,) = [
        derive_gas_facts(g, patient=data.patient, settings=settings, today=date(2026, 11, 20))
        for g in pair_gases(data, windows=windows(settings)).gases
    ]
    inputs = gas.derived["alveolar-po2"].inputs
    assert paco2.source in inputs and fio2.source in inputs and pao2.source not in inputs
    assert len(set(inputs)) == len(inputs)
    assert pao2.source in gas.derived["aa-gradient"].inputs


def test_an_optional_fact_missing_from_the_catalogue_matters_only_when_known() -> None:
    table = DerivedTable()

    @table.quantity("v", "1", (0.0, 100.0), 2, "a, plus d when known")
    def v(*, a: float, d: float | None = None) -> float:
        return a + (d or 0.0)

    specs = {"a": _SMALL_SPECS["a"], "v": table.facts[0].spec}  # d is not in it
    facts: dict[str, FactValue] = {"a": 1.0}
    derivation.compute_derived(table.facts, facts, {}, specs, Settings())
    assert facts == {"a": 1.0, "v": 1.0}
    with pytest.raises(KeyError, match="'d'"):  # d, not a (read first, and in the catalogue)
        derivation.compute_derived(table.facts, {"a": 1.0, "d": 2.0}, {}, specs, Settings())


def test_a_scenario_reuses_the_values_its_changes_do_not_touch() -> None:
    # The alveolar PO2 does not read the residence: a residence scenario hands back the very
    # number the gas's own derivation made (computing it again would make a new one), also
    # under settings equal to the gas's but not the same object.
    path = next(p for p in FIXTURES if p.name == "altitude-visitor.bundle.json")
    (gas, *_) = _gases(path, Settings())
    assert gas.base is not None
    kept = gas.base.facts["alveolar_po2"]
    for settings in (gas.base.settings, Settings()):
        gas.again.clear()
        facts = derive_again(gas, {"altitude_residence": "visitor"}, settings=settings)
        assert facts["alveolar_po2"] is kept
        assert facts["paco2_expected"] is not gas.facts.get("paco2_expected")
