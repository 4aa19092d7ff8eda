"""The derived-fact table written as one function (``table_code``), the scenarios derived
again from the kept values (``derivation.derive_changed``) and the pairing's windows worked
out once: each against the general computation it stands for.

The general computations are the reference here, as in ``test_step_code.py``: the long way
of deriving (every entry's general outcome, every union of observations de-duplicated by
``dict.fromkeys``), deriving everything again, and ``Windows.limit`` asked value by value.
"""

from __future__ import annotations

import inspect
import math
from collections.abc import Callable
from dataclasses import replace
from datetime import timedelta
from pathlib import Path

import orjson
import pytest

from service.assess import derivation, derive
from service.assess.assess import windows
from service.assess.catalogue import DEFAULT_CATALOGUE
from service.assess.derivation import DerivedFact, DerivedTable, FactValue
from service.assess.derive import derive_gas_facts
from service.assess.pairing import pair_gases
from service.config import Settings
from service.engine.facts import FactKind, FactSpec
from service.fhir.extract import read_bundle
from service.intake.model import Quantity as Q

from .builders import T0, intake, m
from .test_pairing import WINDOWS as WIDE
from .test_step_code import (
    FIXTURES,
    _copies,
    _variants,
    files_what_the_long_way_files,
)


@pytest.mark.parametrize("path", FIXTURES, ids=lambda p: p.name)
def test_the_table_files_what_the_long_way_files_with_its_own_facts_known_before(
    path: Path,
) -> None:
    # A scenario derived in full brings facts the table sets (a raised FiO2 with every value
    # derived from it): the written table must read them as the long way does.
    settings = Settings()
    data = read_bundle(orjson.loads(path.read_bytes()))
    for gas in pair_gases(data, windows=windows(settings)).gases:
        derived = derive_gas_facts(gas, patient=data.patient, settings=settings, today=T0.date())
        for facts in _variants(derived.facts):
            for sources in (dict(derived.sources), _copies(derived.sources)):
                files_what_the_long_way_files(facts, sources, settings)


_SPECS = {
    name: FactSpec(name, FactKind.QUANTITY, "1", name, 0.0, 100.0) for name in ("a", "b", "x")
}


def _unknown_reader() -> tuple[DerivedFact, ...]:
    table = DerivedTable()

    @table.quantity("from_x", "1", (0.0, 100.0), 2, "test: x, reading two unknown facts")
    def from_x(
        *, x: float, no_such_a: float | None = None, no_such_b: float | None = None
    ) -> float:
        return x

    return tuple(table.facts)


@pytest.mark.parametrize(
    ("facts", "named"),
    [
        ({"x": 0.5}, None),
        ({"no_such_a": 1.0, "no_such_b": 1.0}, None),  # x unknown: the entry does not run
        ({"x": 0.5, "no_such_b": 1.0}, "no_such_b"),
        ({"x": 0.5, "no_such_a": 1.0, "no_such_b": 1.0}, "no_such_a"),
        ({"x": 0.5, "no_such_a": 1.0}, "no_such_a"),
    ],
)
def test_a_known_fact_the_catalogue_lacks_is_named_as_the_general_path_names_it(
    facts: dict[str, FactValue], named: str | None
) -> None:
    entries = _unknown_reader()
    specs = {**_SPECS, entries[0].name: entries[0].spec}
    plan = derivation._plan(entries, specs)
    (step,) = plan.steps
    if named is None:
        filed, problems = derivation._compute(plan, dict(facts), {}, Settings())
        assert (filed, problems) == ({}, [])
        return
    with pytest.raises(KeyError) as general:
        derivation._outcome(step, facts, Settings())
    with pytest.raises(KeyError) as written:
        derivation._compute(plan, dict(facts), {}, Settings())
    assert general.value.args == written.value.args == (named,)


def _small_table(calls: list[str]) -> tuple[DerivedFact, ...]:
    """w = a + b; x = 2a, not applicable above 50; y = 2b; z = x + 1."""
    table = DerivedTable()

    @table.quantity("w", "1", (0.0, 1000.0), 2, "a plus b")
    def w(*, a: float, b: float) -> float:
        calls.append("w")
        return a + b

    @table.quantity("x", "1", (0.0, 1000.0), 2, "twice a, up to a = 50")
    def x(*, a: float) -> float | None:
        calls.append("x")
        return None if a > 50.0 else 2.0 * a

    @table.quantity("y", "1", (0.0, 1000.0), 2, "twice b")
    def y(*, b: float) -> float:
        calls.append("y")
        return 2.0 * b

    @table.quantity("z", "1", (0.0, 1000.0), 2, "x plus one")
    def z(*, x: float) -> float:
        calls.append("z")
        return x + 1.0

    return tuple(table.facts)


def _in_full(
    entries: tuple[DerivedFact, ...],
    specs: dict[str, FactSpec],
    measured: dict[str, FactValue],
    changes: dict[str, FactValue],
) -> dict[str, FactValue]:
    facts = {**measured, **changes}
    derivation.compute_derived(entries, facts, {}, specs, Settings())
    return facts


@pytest.mark.parametrize(
    ("measured", "changes"),
    [
        ({"a": 60.0, "b": 2.0}, {"a": 3.0}),  # x and z appear: they go where the table sets them
        ({"a": 1.0, "b": 2.0}, {"a": 60.0}),  # x and z go
        ({"a": 1.0}, {"b": 2.0}),  # w and y appear before x and z
        ({"a": 1.0, "b": 2.0}, {"a": 1.0}),  # the measured value again: nothing computed
        ({"a": 1.0, "b": 2.0}, {"b": 5.0}),
        ({"a": 60.0}, {"a": 3.0}),  # x appears with only what it needs known
    ],
)
@pytest.mark.parametrize("in_order", [True, False])
def test_a_scenario_derived_from_the_kept_values_is_the_scenario_derived_in_full(
    measured: dict[str, FactValue], changes: dict[str, FactValue], in_order: bool
) -> None:
    calls: list[str] = []
    entries = _small_table(calls)
    specs = {**_SPECS, **{e.name: e.spec for e in entries}}
    base = _in_full(entries, specs, measured, {})
    kept = {k: v for k, v in base.items() if k not in measured}
    if not in_order:  # kept values in another order: taken name by name, in table order
        kept = dict(reversed(kept.items()))
    full = _in_full(entries, specs, measured, changes)
    calls.clear()
    again = derivation.derive_changed(
        entries, measured, kept, changes, specs, Settings(), in_order=in_order
    )
    assert list(again.items()) == list(full.items())
    changed = {k for k, v in changes.items() if measured.get(k) != v}
    reads = {"w": {"a", "b"}, "x": {"a"}, "y": {"b"}, "z": {"x"}}
    if not changed:
        assert calls == []
    else:  # only what reads a changed fact, directly or through another, is computed
        assert set(calls) <= {n for n, r in reads.items() if r & changed} | {"z"}
        assert "y" not in calls or "b" in changed


def test_kept_values_are_taken_in_table_order_unless_the_caller_says_they_are() -> None:
    entries = _small_table([])
    specs = {**_SPECS, **{e.name: e.spec for e in entries}}
    measured: dict[str, FactValue] = {"a": 1.0, "b": 2.0}
    base = _in_full(entries, specs, measured, {})
    kept = dict(reversed([(k, v) for k, v in base.items() if k not in measured]))
    again = derivation.derive_changed(entries, measured, kept, {"b": 5.0}, specs, Settings())
    assert list(again) == ["a", "b", "w", "x", "y", "z"]
    assert again == _in_full(entries, specs, measured, {"b": 5.0})


def test_a_table_that_reads_a_fact_set_after_it_is_derived_in_full() -> None:
    # "first" reads "later", set after it: from the kept values it would read the old
    # "later", where deriving in full reads none.
    table = DerivedTable()

    @table.quantity("first", "1", (0.0, 1000.0), 2, "a plus a later fact")
    def first(*, a: float, later: float | None = None) -> float:
        return a + (later or 0.0)

    @table.quantity("later", "1", (0.0, 1000.0), 2, "ten times a")
    def later(*, a: float) -> float:
        return 10.0 * a

    entries = tuple(table.facts)
    specs = {**_SPECS, **{e.name: e.spec for e in entries}}
    measured: dict[str, FactValue] = {"a": 1.0}
    kept = {k: v for k, v in _in_full(entries, specs, measured, {}).items() if k != "a"}
    again = derivation.derive_changed(
        entries, measured, kept, {"a": 2.0}, specs, Settings(), in_order=True
    )
    assert (
        again
        == _in_full(entries, specs, measured, {"a": 2.0})
        == {
            "a": 2.0,
            "first": 2.0,
            "later": 20.0,
        }
    )


def test_many_sets_of_changes_each_reach_what_they_reach() -> None:
    calls: list[str] = []
    entries = _small_table(calls)
    specs = {**_SPECS, **{e.name: e.spec for e in entries}}
    measured: dict[str, FactValue] = {"a": 1.0, "b": 2.0}
    kept = {k: v for k, v in _in_full(entries, specs, measured, {}).items() if k not in measured}
    for step in range(80):  # more sets of changed facts than a plan keeps
        changes: dict[str, FactValue] = {"a": float(step % 7)}
        changes.update({f"c{i}": 1.0 for i in range(step % 9)})
        again = derivation.derive_changed(entries, measured, kept, changes, specs, Settings())
        assert list(again.items()) == list(_in_full(entries, specs, measured, changes).items())


NARROW = replace(WIDE, context=timedelta(minutes=10), haemoglobin=timedelta(hours=1))


def test_each_windows_pairs_by_its_own_limits_when_two_alternate() -> None:
    # An SpO2 20 minutes and a haemoglobin 3 hours from the gas: inside the wide windows,
    # outside the narrow ones, whichever was used last.
    data = intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.SPO2, 0.93, -20), m(Q.HAEMOGLOBIN, 12.0, -180))
    for w in (WIDE, NARROW, NARROW, WIDE, NARROW):
        (gas,) = pair_gases(data, windows=w).gases
        for quantity in (Q.SPO2, Q.HAEMOGLOBIN):
            limit = w.limit(quantity)
            assert limit is not None
            inside = timedelta(minutes=20 if quantity is Q.SPO2 else 180) <= limit
            assert (quantity in gas.values) is inside
            assert (quantity in gas.out_of_window) is not inside


@pytest.mark.parametrize("name", ["filed", "problems", "sources", "dd", "isdisjoint"])
def test_a_parameter_the_table_cannot_write_is_refused(name: str) -> None:
    # Names the step writer takes but the table's own source uses: the plan is refused
    # rather than written with a keyword that could be read as one of its words.
    table = DerivedTable()

    def compute(**arguments: float) -> float:
        return 1.0

    entry = table.quantity("odd", "1", (0.0, 10.0), 1, "test: an odd parameter name")
    fact = entry(_with_parameter(compute, name))
    specs = {**_SPECS, name: FactSpec(name, FactKind.QUANTITY, "1", name, 0.0, 10.0)}
    with pytest.raises(ValueError, match="cannot be written"):
        derivation._plan((fact,), {**specs, "odd": fact.spec})


def _with_parameter(compute: Callable[..., float], name: str) -> Callable[..., float]:
    """``compute`` with one keyword-only parameter ``name`` in its signature."""
    parameter = inspect.Parameter(name, inspect.Parameter.KEYWORD_ONLY, annotation=float)
    compute.__signature__ = inspect.Signature([parameter])  # type: ignore[attr-defined]
    return compute


_ODD_RANGES = [
    FactSpec("low_open", FactKind.QUANTITY, "1", "test", -math.inf, 5.0),
    FactSpec("high_open", FactKind.QUANTITY, "1", "test", 0.0, math.inf),
    FactSpec("closed", FactKind.QUANTITY, "1", "test", -2.0, 5.0),
    FactSpec("flag", FactKind.BOOLEAN, None, "test"),
]


@pytest.mark.parametrize(
    "spec",
    [*(DEFAULT_CATALOGUE[name] for name in DEFAULT_CATALOGUE), *_ODD_RANGES],
    ids=lambda s: s.name,
)
def test_a_measured_float_is_accepted_unasked_only_where_its_entry_accepts_it(
    spec: FactSpec,
) -> None:
    # The shortcut's range is the entry's own when both ends are finite, else empty: every
    # float inside it is one FactSpec.problem accepts, and at its ends too.
    low, high = derive._accepted(spec)
    finite = (
        spec.minimum is not None
        and spec.maximum is not None
        and math.isfinite(spec.minimum)
        and math.isfinite(spec.maximum)
    )
    if not finite:
        assert (low, high) == (math.inf, -math.inf)
        return
    assert (low, high) == (spec.minimum, spec.maximum)
    for value in (low, (low + high) / 2.0, high):
        assert spec.problem(float(value)) is None
