"""The rule program (``service.engine.program``): the rule set's leaves and conditions written
out as one function at load. It must give exactly the states the compiled closures give (and
the Kleene logic of the small reference interpreter in ``test_properties``, written
independently), for every leaf, rule and undecided fact, and its source must hold nothing taken
from a rule file."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import orjson
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine import RuleSet
from service.engine.compiled import BlockStates, all_of, any_of
from service.engine.conditions import ConditionCompiler, Location
from service.engine.facts import FactKind, FactValue
from service.engine.logic import Operator
from service.engine.program import RuleProgram, _source_is_safe
from service.runtime import Runtime
from tests.engine.builders import MMHG, build, manifest, rule
from tests.engine.test_properties import _CONDITION, conditions, facts_strategy, reference

ROOT = Path(__file__).resolve().parents[2]
BUNDLES = sorted((ROOT / "fixtures").rglob("*.bundle.json"))


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def assert_same_as_closures(ruleset: RuleSet, facts: dict[str, Any]) -> None:
    """Leaves, rules and every rule's undecided facts, from the program and the closures."""
    leaf_states, rule_states, node_states = ruleset.program.run(facts)
    plain = tuple(leaf.test(facts) for leaf in ruleset.leaves)
    assert leaf_states == plain
    assert all(a is b for a, b in zip(leaf_states, plain, strict=True))
    kept = BlockStates(plain)
    for position, item in enumerate(ruleset.evaluated):
        condition = item.condition
        assert rule_states[position] is condition.truth(kept), item.ref
        written = [i for i in condition.leaves if i in condition.undecided(kept)]
        expected = tuple(dict.fromkeys(ruleset.leaves[i].fact for i in written))
        assert ruleset.program.undecided(position, leaf_states, node_states) == expected, item.ref


@pytest.mark.parametrize("path", BUNDLES, ids=lambda p: p.name)
def test_the_shipped_rules_give_the_closures_states_on_every_fixture(
    runtime: Runtime, path: Path
) -> None:
    ruleset = runtime.ruleset
    assessment = runtime.assess_intake(runtime.read(orjson.loads(path.read_bytes())))
    facts = {k: v for k, v in assessment.index.facts.items() if k in ruleset.catalogue}
    assert_same_as_closures(ruleset, ruleset.catalogue.as_stated(facts))


def _near_thresholds(ruleset: RuleSet) -> st.SearchStrategy[dict[str, Any]]:
    """Facts of the shipped catalogue, each missing or at, just below or just above a
    threshold some leaf tests it against (where ``<`` and ``<=`` part), or any code/flag."""
    values: dict[str, set[FactValue]] = {}
    for leaf in ruleset.leaves:
        spec = ruleset.catalogue[leaf.fact]
        found = values.setdefault(leaf.fact, set())
        if spec.kind is FactKind.BOOLEAN:
            found.update((True, False))
        elif spec.kind is FactKind.CODE:
            found.update(spec.allowed)
        elif leaf.operator is not Operator.PRESENT:
            edges = leaf.threshold if isinstance(leaf.threshold, tuple) else (leaf.threshold,)
            for edge in edges:
                edge = float(edge)
                found.update((edge, edge - 0.5, edge + 0.5, edge * (1 + 1e-12)))
        if spec.kind is FactKind.QUANTITY and not found:
            found.add(float(spec.minimum or 0.0))
    return st.fixed_dictionaries(
        {}, optional={name: st.sampled_from(sorted(v, key=repr)) for name, v in values.items()}
    )


@settings(max_examples=300, deadline=None)
@given(data=st.data())
def test_the_shipped_rules_give_the_closures_states_at_every_threshold(
    runtime: Runtime, data: st.DataObject
) -> None:
    ruleset = runtime.ruleset
    assert_same_as_closures(ruleset, data.draw(_near_thresholds(ruleset)))


@settings(max_examples=200, deadline=None)
@given(conditions(), conditions(), facts_strategy)
def test_random_conditions_give_the_reference_interpreters_answer(
    first: dict[str, Any], second: dict[str, Any], facts: dict[str, FactValue]
) -> None:
    compiler = ConditionCompiler(DEFAULT_CATALOGUE, {}, {})
    compiled = [
        compiler.compile(_CONDITION.validate_python(c), Location("p", "p", "when"))
        for c in (first, second, {"definitely": first})
    ]
    program = RuleProgram(compiler.leaves, compiled)
    leaf_states, rule_states, node_states = program.run(facts)
    assert rule_states[0] is reference(first, facts)
    assert rule_states[1] is reference(second, facts)
    assert rule_states[2] is (reference(first, facts) is True)
    for position, condition in enumerate(compiled):
        indices = condition.undecided(leaf_states)
        written = [i for i in condition.leaves if i in indices]
        expected = tuple(dict.fromkeys(compiler.leaves[i].fact for i in written))
        assert program.undecided(position, leaf_states, node_states) == expected
        assert bool(expected) is (rule_states[position] is None)  # no present leaf here


def test_every_operator_is_written_as_its_closure_reads_it() -> None:
    ruleset = build(
        manifest(),
        [
            rule(
                "every-operator",
                when={
                    "any": [
                        {"fact": "arterial_pco2", "lt": 40, "unit": MMHG},
                        {"fact": "arterial_pco2", "le": 40, "unit": MMHG},
                        {"fact": "arterial_pco2", "gt": 40, "unit": MMHG},
                        {"fact": "arterial_pco2", "ge": 40, "unit": MMHG},
                        {"fact": "arterial_pco2", "eq": 40, "unit": MMHG},
                        {"fact": "arterial_pco2", "between": [35, 45], "unit": MMHG},
                        {"fact": "arterial_pco2", "present": True},
                        {"fact": "specimen_unknown", "is": True},
                        {"fact": "oxygen_device", "in": ["venturi-mask"]},
                    ]
                },
            )
        ],
    )
    for value in (34.9, 35.0, 39.99, 40.0, 40.0 + 1e-12, 40.01, 45.0, 45.1):
        for flag in (True, False):
            for code in ("venturi-mask", "simple-mask"):
                facts = {"arterial_pco2": value, "specimen_unknown": flag, "oxygen_device": code}
                assert_same_as_closures(ruleset, facts)
    assert_same_as_closures(ruleset, {})
    leaf_states, _, _ = ruleset.program.run({"arterial_pco2": 40.0 + 1e-12})
    assert leaf_states[:6] == (False, False, False, True, True, True)  # eq within 1e-9


def test_an_empty_all_is_true_and_an_empty_any_false_as_the_closures_say() -> None:
    program = RuleProgram([], [all_of([]), any_of([])])
    assert program.run({})[1] == [True, False] == [all_of([]).truth(()), any_of([]).truth(())]


def test_a_block_used_by_many_rules_is_written_once(runtime: Runtime) -> None:
    source = runtime.ruleset.program.source
    nodes = re.findall(r"^    (n\d+) = ", source, flags=re.MULTILINE)
    assert len(nodes) == len(set(nodes))
    compiler = ConditionCompiler(DEFAULT_CATALOGUE, {}, {})
    both = {"all": [{"fact": "specimen_unknown", "is": True}, {"fact": "spo2", "present": True}]}
    shared = compiler.compile(_CONDITION.validate_python(both), Location("p", "p", "when"))
    program = RuleProgram(compiler.leaves, [any_of([shared]), all_of([shared])])
    # the shared all once, then the any and the all over it
    assert re.findall(r"^    (n\d+) = ", program.source, flags=re.MULTILINE) == ["n0", "n1", "n2"]
    assert program.run({"spo2": 90.0})[1] == [None, None]


def test_the_source_holds_no_text_of_the_rule_files(runtime: Runtime) -> None:
    ruleset = runtime.ruleset
    source = ruleset.program.source
    assert _source_is_safe(source)
    names = set(re.findall(r"[A-Za-z_]\w*", source))
    assert not names & {leaf.fact for leaf in ruleset.leaves}
    assert not names & set(ruleset.parameters)


@pytest.mark.parametrize(
    "source",
    [
        "def run(facts):\n    return 'x'\n",
        'def run(facts):\n    return "x"\n',
        "def run(facts):\n    return __import__\n",
        "def run(facts):\n    return open\n",
        "def run(facts):\n    l1 = arterial_po2\n",
        "def run(facts):\n    return N1\\\n",
    ],
)
def test_a_source_with_a_string_or_an_outside_name_is_refused(source: str) -> None:
    assert not _source_is_safe(source)


def test_a_source_of_made_up_names_only_is_accepted() -> None:
    assert _source_is_safe("def run(facts):\n    get = facts.get\n    f0 = get(N0)\n")
