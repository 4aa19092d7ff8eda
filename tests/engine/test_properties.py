"""Properties of three-valued evaluation over random conditions and random fact presence.

Conditions are drawn as the same plain data a rule file holds, compiled by the engine,
and compared with a small reference interpreter written here independently.
"""

from typing import Any

from hypothesis import given, settings
from hypothesis import strategies as st
from pydantic import TypeAdapter

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine.conditions import ConditionCompiler, Location
from service.engine.facts import FactValue
from service.engine.logic import TruthValue
from service.engine.schema import Condition

FLAGS = ("fio2_estimated_from_flow", "fio2_time_mismatch", "specimen_unknown")
LEVELS = ("spo2", "arterial_so2")
_CONDITION: TypeAdapter[Any] = TypeAdapter(Condition)


def _leaves(with_presence: bool) -> st.SearchStrategy[dict[str, Any]]:
    flags = st.builds(lambda f, v: {"fact": f, "is": v}, st.sampled_from(FLAGS), st.booleans())
    levels = st.builds(
        lambda f, op, t: {"fact": f, op: t, "unit": "%"},
        st.sampled_from(LEVELS),
        st.sampled_from(["lt", "le", "gt", "ge"]),
        st.integers(min_value=80, max_value=100),
    )
    options = [flags, levels]
    if with_presence:
        options.append(
            st.builds(
                lambda f, v: {"fact": f, "present": v},
                st.sampled_from(FLAGS + LEVELS),
                st.booleans(),
            )
        )
    return st.one_of(*options)


def conditions(with_presence: bool = True) -> st.SearchStrategy[dict[str, Any]]:
    return st.recursive(
        _leaves(with_presence),
        lambda inner: st.one_of(
            st.builds(lambda parts: {"all": parts}, st.lists(inner, min_size=1, max_size=3)),
            st.builds(lambda parts: {"any": parts}, st.lists(inner, min_size=1, max_size=3)),
            st.builds(lambda part: {"not": part}, inner),
        ),
        max_leaves=8,
    )


facts_strategy = st.fixed_dictionaries(
    {},
    optional={
        **{name: st.booleans() for name in FLAGS},
        **{name: st.integers(min_value=70, max_value=100).map(float) for name in LEVELS},
    },
)


def run(condition: dict[str, Any], facts: dict[str, FactValue]) -> TruthValue:
    compiler = ConditionCompiler(DEFAULT_CATALOGUE, {}, {})
    compiled = compiler.compile(_CONDITION.validate_python(condition), Location("p", "p", "when"))
    assert compiler.problems == []
    states = [leaf.test(facts) for leaf in compiler.leaves]
    return compiled.truth(states)


def reference(condition: dict[str, Any], facts: dict[str, FactValue]) -> TruthValue:
    """Kleene logic, spelled out the slow way."""
    if "all" in condition:
        parts = [reference(part, facts) for part in condition["all"]]
        return False if False in parts else (None if None in parts else True)
    if "any" in condition:
        parts = [reference(part, facts) for part in condition["any"]]
        return True if True in parts else (None if None in parts else False)
    if "not" in condition:
        inner = reference(condition["not"], facts)
        return None if inner is None else not inner
    name = condition["fact"]
    if "present" in condition:
        return (name in facts) == bool(condition["present"])
    if name not in facts:
        return None
    value = facts[name]
    if "is" in condition:
        return value is condition["is"]
    for operator, test in (
        ("lt", float.__lt__),
        ("le", float.__le__),
        ("gt", float.__gt__),
        ("ge", float.__ge__),
    ):
        if operator in condition:
            return bool(test(float(value), float(condition[operator])))
    raise AssertionError(condition)


@settings(max_examples=150, deadline=None)
@given(conditions(), facts_strategy)
def test_compiled_condition_agrees_with_the_reference_interpreter(
    condition: dict[str, Any], facts: dict[str, FactValue]
) -> None:
    assert run(condition, facts) is reference(condition, facts)


@settings(max_examples=150, deadline=None)
@given(conditions(), facts_strategy)
def test_not_not_c_is_c(condition: dict[str, Any], facts: dict[str, FactValue]) -> None:
    assert run({"not": {"not": condition}}, facts) is run(condition, facts)


@settings(max_examples=150, deadline=None)
@given(conditions(with_presence=False), facts_strategy, facts_strategy)
def test_learning_a_missing_fact_never_changes_a_decided_answer(
    condition: dict[str, Any], known: dict[str, FactValue], extra: dict[str, FactValue]
) -> None:
    # Without presence tests, evaluation is monotone in knowledge: only unknown can move.
    before = run(condition, known)
    after = run(condition, {**extra, **known})
    if before is not None:
        assert after is before


@settings(max_examples=150, deadline=None)
@given(
    st.lists(conditions(with_presence=False), min_size=1, max_size=4),
    facts_strategy,
    facts_strategy,
)
def test_adding_a_missing_fact_never_turns_a_true_any_into_false(
    parts: list[dict[str, Any]], known: dict[str, FactValue], extra: dict[str, FactValue]
) -> None:
    condition = {"any": parts}
    if run(condition, known) is True:
        assert run(condition, {**extra, **known}) is True


@settings(max_examples=100, deadline=None)
@given(conditions(), facts_strategy)
def test_undecided_leaves_exist_exactly_when_a_condition_is_unknown(
    condition: dict[str, Any], facts: dict[str, FactValue]
) -> None:
    compiler = ConditionCompiler(DEFAULT_CATALOGUE, {}, {})
    compiled = compiler.compile(_CONDITION.validate_python(condition), Location("p", "p", "when"))
    states = [leaf.test(facts) for leaf in compiler.leaves]
    undecided = compiled.undecided(states)
    assert bool(undecided) == (compiled.truth(states) is None)
    assert all(compiler.leaves[index].fact not in facts for index in undecided)
