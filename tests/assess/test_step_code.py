"""Each derived-fact entry's written function (``step_code``) gives what the general path
(``derivation._outcome``) gives, and the writer refuses what it cannot write safely.

The general path is the reference: it builds the keyword arguments from the entry's
signature and checks the outcome against the catalogue entry (``FactSpec.problem``). The
written function must agree on every entry for the facts of every fixture gas, and for the
same facts pushed outside their catalogue ranges, to zero, to negatives and with optional
facts dropped, so that errors, refusals and the percentage conversions are all compared.
"""

from __future__ import annotations

import math
from pathlib import Path

import orjson
import pytest

from service.assess import derivation
from service.assess.assess import windows
from service.assess.catalogue import DEFAULT_CATALOGUE
from service.assess.derivation import Computed, Derived, DerivedTable, FactValue
from service.assess.derive import derive_gas_facts
from service.assess.derived import DERIVED_FACTS
from service.assess.pairing import pair_gases
from service.assess.step_code import _source_is_safe, write_step
from service.config import Settings
from service.exceptions import PhysiologyError
from service.fhir.extract import read_bundle
from service.intake.model import Source

from .builders import T0

FIXTURES = sorted((Path(__file__).resolve().parents[2] / "fixtures").rglob("*.bundle.json"))
PLAN = derivation._plan_of(DERIVED_FACTS, DEFAULT_CATALOGUE)


def _same(a: object, b: object) -> bool:
    """Equal outcomes, with NaN equal to NaN and the sign of zero kept."""
    if isinstance(a, tuple) and isinstance(b, tuple):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b, strict=True))
    if isinstance(a, float) and isinstance(b, float):
        if math.isnan(a) or math.isnan(b):
            return math.isnan(a) and math.isnan(b)
        return a == b and math.copysign(1.0, a) == math.copysign(1.0, b)
    return type(a) is type(b) and a == b


def _variants(facts: dict[str, FactValue]) -> list[dict[str, FactValue]]:
    """``facts`` and the same facts with each number scaled, zeroed, negated and dropped."""
    out = [facts]
    for factor in (0.0, -1.0, 0.5, 3.0, 1e6):
        out.append(
            {
                k: (v * factor if isinstance(v, float) and not isinstance(v, bool) else v)
                for k, v in facts.items()
            }
        )
    out.append({k: v for i, (k, v) in enumerate(facts.items()) if i % 2})
    out.append({k: v for i, (k, v) in enumerate(facts.items()) if not i % 2})
    return out


def _outcome(step: derivation._Step, facts: dict[str, FactValue], settings: Settings) -> object:
    try:
        return derivation._outcome(step, facts, settings)
    except Exception as error:  # compared with the written function's
        return type(error), str(error)


def _run(step: derivation._Step, facts: dict[str, FactValue], settings: Settings) -> object:
    try:
        return step.run(facts, settings)
    except Exception as error:  # compared with the general path's
        return type(error), str(error)


@pytest.mark.parametrize("path", FIXTURES, ids=lambda p: p.name)
def test_every_written_step_gives_the_general_outcome(path: Path) -> None:
    settings = Settings()
    data = read_bundle(orjson.loads(path.read_bytes()))
    compared = 0
    for gas in pair_gases(data, windows=windows(settings)).gases:
        derived = derive_gas_facts(gas, patient=data.patient, settings=settings, today=T0.date())
        for facts in _variants(derived.facts) + _variants(derived.measured):
            for step in PLAN.steps:
                if not facts.keys() >= step.needed:
                    continue
                expected = _outcome(step, facts, settings)
                assert _same(_run(step, facts, settings), expected), (step.name, expected)
                compared += 1
    assert compared > 0


def test_the_plan_writes_a_function_for_every_entry_of_the_table() -> None:
    assert len(PLAN.steps) == len(DERIVED_FACTS)
    assert all(step.run is not derivation._unplanned for step in PLAN.steps)
    assert all(step.run.__code__.co_filename.startswith("<derived step") for step in PLAN.steps)


def _table() -> DerivedTable:
    """A small table of our own with every form a step can take: a percentage read and
    written, an optional fact, the settings, a method, an error and a boolean flag."""
    table = DerivedTable()

    @table.quantity("half_pct", "%", (0.0, 100.0), 1, "test: half of a percentage")
    def half(*, spo2: float, fio2: float | None = None) -> Computed | None:
        if spo2 < 0:
            raise PhysiologyError("spo2", spo2, "negative")
        if fio2 is not None and fio2 > 0.9:
            return None
        return Computed(spo2 / 2, "halved")

    @table.flag("site_flag", "test: whether the site says so")
    def flag(*, half_pct: float, settings: Settings) -> bool:
        return half_pct > 0.2 and settings is not None

    return table


@pytest.mark.parametrize("spo2", [-10.0, 0.0, 40.0, 100.0, 250.0, math.nan, math.inf])
@pytest.mark.parametrize("fio2", [None, 0.21, 0.95])
def test_a_table_of_our_own_gives_the_same_on_both_paths(spo2: float, fio2: float | None) -> None:
    specs = dict(DEFAULT_CATALOGUE)
    table = _table()
    for entry in table.facts:
        specs[entry.name] = entry.spec
    plan = derivation._plan(tuple(table.facts), specs)
    settings = Settings()
    facts: dict[str, FactValue] = {"spo2": spo2}
    if fio2 is not None:
        facts["fio2"] = fio2
    for step in plan.steps:
        if facts.keys() >= step.needed:
            expected = _outcome(step, facts, settings)
            assert _same(_run(step, facts, settings), expected)
            value = expected[0] if isinstance(expected, tuple) else None
            if isinstance(value, (float, bool)):
                facts[step.name] = value


def test_the_source_check_refuses_quotes_and_unknown_names() -> None:
    assert _source_is_safe("def run(facts, settings):\n    a0 = facts[n0]\n", frozenset())
    assert not _source_is_safe("def run(facts):\n    a0 = facts['x']\n", frozenset())
    assert not _source_is_safe('def run(facts):\n    a0 = "x"\n', frozenset())
    assert not _source_is_safe("def run(facts):\n    a0 = open(n0)\n", frozenset())
    # A quote or a backslash alone is refused, every name being allowed.
    assert not _source_is_safe("def run(facts):\n    a0 = n0 + ''\n", frozenset())
    assert not _source_is_safe('def run(facts):\n    a0 = n0 + ""\n', frozenset())
    assert not _source_is_safe("def run(facts):\n    a0 = n0 \\\n", frozenset())
    assert _source_is_safe("def run(facts):\n    out = c(pao2=a0)\n", frozenset({"pao2"}))
    assert not _source_is_safe("def run(facts):\n    out = c(pao2=a0)\n", frozenset())


@pytest.mark.parametrize("name", ["value", "out", "class", "c", "not-a-name"])
def test_a_parameter_that_cannot_be_written_is_refused(name: str) -> None:
    def compute(**_: object) -> float:
        return 1.0

    with pytest.raises(ValueError, match="cannot be written"):
        write_step(compute, Computed, (name,), (), frozenset(), False, True, False, 0.0, 1.0, str)


def test_a_step_reading_a_fact_the_catalogue_lacks_keeps_the_general_path() -> None:
    table = DerivedTable()

    @table.quantity("from_nowhere", "1", (0.0, 1.0), 1, "test: reads an unknown fact")
    def from_nowhere(*, no_such_fact: float) -> float:
        return no_such_fact

    plan = derivation._plan(tuple(table.facts), dict(DEFAULT_CATALOGUE))
    (step,) = plan.steps
    with pytest.raises(KeyError, match="no_such_fact"):
        step.run({"no_such_fact": 0.5}, Settings())


def _compute_the_long_way(
    facts: dict[str, FactValue],
    sources: dict[str, tuple[Source, ...]],
    settings: Settings,
) -> tuple[dict[str, Derived], list[str]]:
    """``derivation._compute`` written plainly: the general outcome of every step, every
    union of sources de-duplicated by ``dict.fromkeys``, every record built by its class."""
    filed: dict[str, Derived] = {}
    problems: list[str] = []
    for step in PLAN.steps:
        if not facts.keys() >= step.needed:
            continue
        value, method, problem = derivation._outcome(step, facts, settings)
        if problem is not None:
            problems.append(f"{step.name}: {problem}")
            continue
        if value is None:
            continue
        found: list[Source] = []
        for name in step.reads:
            if name in facts:
                found += sources.get(name, ())
        used = tuple(dict.fromkeys(found))
        facts[step.name] = value
        sources[step.name] = used
        if step.result is not None:
            assert step.spec.unit is not None and isinstance(value, float)
            filed[step.result] = Derived(value, step.spec.unit, method, used)
    return filed, problems


def _copies(sources: dict[str, tuple[Source, ...]]) -> dict[str, tuple[Source, ...]]:
    """``sources`` with every Source an equal copy, and each fact's first source repeated
    as a copy, so that de-duplication meets equal sources that are not the same object."""
    return {
        k: tuple(Source(s.reference, s.expression) for s in v) + v[:1] for k, v in sources.items()
    }


def files_what_the_long_way_files(
    facts: dict[str, FactValue], sources: dict[str, tuple[Source, ...]], settings: Settings
) -> None:
    """The plan's ``_compute`` and the long way, each on its own copy of ``facts`` and
    ``sources``, set the same facts and sources in the same order and file equal records."""
    fast_facts, fast_sources = dict(facts), dict(sources)
    fast = derivation._compute(PLAN, fast_facts, fast_sources, settings)
    long_facts, long_sources = dict(facts), dict(sources)
    expected = _compute_the_long_way(long_facts, long_sources, settings)
    assert list(fast_facts) == list(long_facts)
    assert all(_same(fast_facts[k], long_facts[k]) for k in fast_facts)
    assert fast_sources == long_sources
    assert fast[1] == expected[1]
    assert list(fast[0]) == list(expected[0])
    for name, record in fast[0].items():
        other = expected[0][name]
        assert type(record) is Derived
        assert _same(record.value, other.value)
        assert (record.unit, record.method, record.inputs) == (
            other.unit,
            other.method,
            other.inputs,
        )
        assert record == other and hash(record) == hash(other)
        assert repr(record) == repr(other)


@pytest.mark.parametrize("path", FIXTURES, ids=lambda p: p.name)
def test_the_loop_files_what_the_long_way_files(path: Path) -> None:
    settings = Settings()
    data = read_bundle(orjson.loads(path.read_bytes()))
    for gas in pair_gases(data, windows=windows(settings)).gases:
        derived = derive_gas_facts(gas, patient=data.patient, settings=settings, today=T0.date())
        for facts in _variants(derived.measured):
            for sources in (dict(derived.measured_sources), _copies(derived.measured_sources)):
                files_what_the_long_way_files(facts, sources, settings)


def test_a_record_set_through_its_slots_is_the_classes_own() -> None:
    inputs = (Source("Observation/a", "Bundle.entry[0].resource"),)
    record = derivation.Derived(7.5, "mm[Hg]", "by a method", inputs)
    assert record == Derived(7.5, "mm[Hg]", "by a method", inputs)
    assert (record.value, record.unit, record.method, record.inputs) == (
        7.5,
        "mm[Hg]",
        "by a method",
        inputs,
    )
    with pytest.raises(AttributeError):
        record.value = 1.0  # type: ignore[misc]
