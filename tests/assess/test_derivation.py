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

import pytest

from service.assess import derivation
from service.assess.catalogue import DEFAULT_CATALOGUE, MEASURED_FACTS
from service.assess.derivation import DerivedTable, FactValue, check_order
from service.assess.derived import DERIVED_FACTS
from service.config import Settings
from service.engine.data_requests import DataRequests
from service.engine.facts import FactOrigin
from service.intake.model import Source

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
