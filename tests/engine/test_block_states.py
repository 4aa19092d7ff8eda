"""A named block's answers kept for one evaluation (``compiled.BlockStates``) are the answers
worked out afresh: the same truth and undecided leaves for every rule, on every fixture."""

from __future__ import annotations

from pathlib import Path

import orjson
import pytest

from service.engine.compiled import (
    BlockStates,
    CompiledCondition,
    StateVector,
    all_of,
    any_of,
    leaf_node,
    named,
)
from service.engine.logic import TruthValue
from service.runtime import Runtime

ROOT = Path(__file__).resolve().parents[2]
BUNDLES = sorted((ROOT / "fixtures").rglob("*.bundle.json"))


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


@pytest.mark.parametrize("path", BUNDLES, ids=lambda p: p.name)
def test_kept_block_answers_are_the_answers_worked_out_afresh(runtime: Runtime, path: Path) -> None:
    ruleset = runtime.ruleset
    assessment = runtime.assess_intake(runtime.read(orjson.loads(path.read_bytes())))
    facts = {k: v for k, v in assessment.index.facts.items() if k in ruleset.catalogue}
    known = ruleset.catalogue.as_stated(facts)
    plain = tuple(test(known) for test in ruleset.leaf_tests)
    kept = BlockStates(plain)
    for rule in ruleset.rules:
        condition = rule.condition
        assert condition.truth(kept) is condition.truth(plain), rule.ref
        assert condition.undecided(kept) == condition.undecided(plain), rule.ref
    assert kept == plain and kept.truths  # the same vector, with blocks kept along the way


def test_a_block_many_rules_refer_to_is_worked_out_once_per_evaluation() -> None:
    calls = []
    inner = all_of([leaf_node(0), leaf_node(1)])

    def counted(states: StateVector) -> TruthValue:
        calls.append(1)
        return inner.truth(states)

    block = named("both", CompiledCondition(counted, inner.undecided, inner.leaves, kind="all"))
    rules = [any_of([block, leaf_node(2)]) for _ in range(5)]
    states: tuple[TruthValue, ...] = (True, None, False)
    assert [rule.truth(states) for rule in rules] == [None] * 5
    assert len(calls) == 5  # a plain vector keeps nothing
    calls.clear()
    kept = BlockStates(states)
    assert [rule.truth(kept) for rule in rules] == [None] * 5
    assert len(calls) == 1
    assert [rule.undecided(kept) for rule in rules] == [frozenset({1})] * 5
    assert BlockStates(states).truths == {}  # a new evaluation starts with nothing kept
