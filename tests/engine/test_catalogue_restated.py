"""A scenario's facts stated from the representative's (``FactCatalogue.restated``,
``run_rules(like=...)``) are the facts ``stated`` makes of them on its own: the same names in
the same order, the same values of the same types, the same error for a bad one.

These are properties of the engine's own code (only the facts that differ from the
representative's are checked and rounded again), not clinical checks: the rounding itself is
checked against stated precisions in ``test_stated_rounding.py`` and ``test_catalogue_stated.py``.
"""

from __future__ import annotations

from pathlib import Path

import orjson
import pytest

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine.errors import FactError
from service.engine.evaluate import run_rules
from service.engine.facts import FactValue
from service.runtime import Runtime
from tests.engine.builders import MMHG, build, leaf, manifest, mechanism, rule
from tests.engine.test_scenario_sharing import UNCERTAIN, labelled_scenarios


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def _typed(facts: dict[str, object]) -> list[tuple[str, type, object]]:
    """Names in order, with each value's type (1.0 and True are equal, not the same)."""
    return [(name, type(value), value) for name, value in facts.items()]


@pytest.mark.parametrize("path", UNCERTAIN, ids=lambda p: p.name)
def test_scenarios_stated_from_the_representative_are_stated_alike(
    runtime: Runtime, path: Path
) -> None:
    ruleset = runtime.ruleset
    _, labelled, _ = labelled_scenarios(runtime, path)
    # The representative's facts as the assess path sends them: the index gas's and the
    # serial facts, whose values the scenarios' facts share where the changes touch nothing.
    assessment = runtime.assess_intake(runtime.read(orjson.loads(path.read_bytes())))
    base = run_rules(ruleset, {**assessment.index.facts, **(assessment.serial or {})})
    for _, facts, _ in labelled:
        alone, like = run_rules(ruleset, facts), run_rules(ruleset, facts, like=base)
        assert _typed(like.known) == _typed(alone.known)  # type: ignore[arg-type]
        assert (like.leaf_states, like.rule_states) == (alone.leaf_states, alone.rule_states)


# Decimals of the facts used below, from the catalogue (PaCO2 in mm[Hg] at one decimal).
PACO2 = "arterial_pco2"
SPO2 = "spo2"


def test_only_the_very_same_value_is_taken_from_before() -> None:
    catalogue = DEFAULT_CATALOGUE
    compared = frozenset({PACO2, SPO2})
    before: dict[str, object] = {PACO2: 45.04, "arterial_gas_present": True, SPO2: 91.0}
    stated_before = catalogue.stated(before, compared)
    assert stated_before[PACO2] == 45.0  # one decimal (the catalogue's precision)
    # The same number as another object, a changed number, a new fact, a fact dropped.
    facts: dict[str, object] = {
        "age": 50.0,
        PACO2: float("45.04"),
        SPO2: 88.04,
        "arterial_gas_present": True,
    }
    found = catalogue.restated(facts, compared, before, stated_before)
    assert _typed(found) == _typed(catalogue.stated(facts, compared))
    assert list(found) == ["age", PACO2, SPO2, "arterial_gas_present"]
    assert found[SPO2] == 88.0


def test_a_value_taken_from_before_keeps_what_before_stated() -> None:
    """The same object is not looked at again: its stated value is the one made before (which
    the representative's run made of it: rounded where that rule set compares it)."""
    catalogue = DEFAULT_CATALOGUE
    value = 45.04
    before = {PACO2: value}
    stated_before: dict[str, object] = {PACO2: 45.0}
    assert catalogue.restated({PACO2: value}, None, before, stated_before) == {PACO2: 45.0}
    # Not the same object: checked and rounded again, by its own rule.
    assert catalogue.restated({PACO2: 46.04}, None, before, stated_before) == {PACO2: 46.0}


def test_a_bad_fact_raises_the_error_stated_raises() -> None:
    catalogue = DEFAULT_CATALOGUE
    before: dict[str, object] = {PACO2: 45.0, SPO2: 91.0}
    stated_before = catalogue.stated(before, None)
    facts: dict[str, object] = {PACO2: 45.0, SPO2: 250.0, "no_such_fact": 1.0}
    with pytest.raises(FactError) as alone:
        catalogue.stated(facts, None)
    with pytest.raises(FactError) as restated:
        catalogue.restated(facts, None, before, stated_before)
    assert restated.value.problems == alone.value.problems
    assert [p.fact for p in restated.value.problems] == [SPO2, "no_such_fact"]


def _ruleset_testing(fact: str):  # type: ignore[no-untyped-def]
    """A rule set whose one rule tests ``fact`` (so it rounds ``fact`` and nothing else)."""
    unit = MMHG if fact == PACO2 else "%"
    return build(
        manifest(blocks={}),  # no block: the default one tests the PaCO2
        [
            rule(
                "graded",
                outcome=mechanism("hypoventilation", "likely", 1),
                when=leaf(fact, "gt", 10, unit),
                rationale="Seen.",
            )
        ],
    )


def test_a_run_of_another_rule_set_is_not_taken_as_like() -> None:
    """Another rule set rounds other facts: its stated facts are no model for this one's."""
    tests_paco2, tests_spo2 = _ruleset_testing(PACO2), _ruleset_testing(SPO2)
    facts: dict[str, FactValue] = {PACO2: 45.04, SPO2: 91.04}
    other = run_rules(tests_spo2, facts)
    assert other.known[PACO2] == 45.04  # not compared there: not rounded
    found = run_rules(tests_paco2, facts, like=other)
    assert found.known == run_rules(tests_paco2, facts).known == {PACO2: 45.0, SPO2: 91.04}


def test_a_run_keeps_its_own_copy_of_the_facts_sent() -> None:
    ruleset = _ruleset_testing(PACO2)
    facts: dict[str, FactValue] = {PACO2: 45.04}
    base = run_rules(ruleset, facts)
    facts[PACO2] = 60.0  # the caller's edit after the run
    assert base.sent == {PACO2: 45.04}
    assert run_rules(ruleset, facts, like=base).known == {PACO2: 60.0}
