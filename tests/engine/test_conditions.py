"""Compiled conditions: every operator, three-valued truth tables, blocks, shared leaves."""

import itertools
from typing import Any

import pytest

from service.engine import Truth, evaluate
from service.engine.facts import FactValue

from .builders import MMHG, build, leaf, manifest, rule

A, B, C = "fio2_estimated_from_flow", "fio2_time_mismatch", "barometric_pressure_estimated"
T, F, U = Truth.TRUE, Truth.FALSE, Truth.UNKNOWN


def _state(when: dict[str, Any], facts: dict[str, FactValue], **manifest_changes: Any) -> Truth:
    ruleset = build(manifest(**manifest_changes), [rule("r", when=when)])
    return evaluate(ruleset, facts).result("r").state


def _facts_for(**states: Truth) -> dict[str, FactValue]:
    """Boolean facts whose `is: true` leaves take the given states (unknown = missing)."""
    return {name: state is T for name, state in states.items() if state is not U}


def _is_true(name: str) -> dict[str, Any]:
    return {"fact": name, "is": True}


@pytest.mark.parametrize(
    ("when", "value", "expected"),
    [
        (leaf("spo2", "lt", 90, "%"), 89.9, T),
        (leaf("spo2", "lt", 90, "%"), 90.0, F),
        (leaf("spo2", "le", 90, "%"), 90.0, T),
        (leaf("spo2", "le", 90, "%"), 90.1, F),
        (leaf("spo2", "gt", 90, "%"), 90.1, T),
        (leaf("spo2", "gt", 90, "%"), 90.0, F),
        (leaf("spo2", "ge", 90, "%"), 90.0, T),
        (leaf("spo2", "ge", 90, "%"), 89.9, F),
        (leaf("spo2", "eq", 90, "%"), 90, T),
        (leaf("spo2", "eq", 90, "%"), 90.5, F),
        (leaf("spo2", "between", [88, 92], "%"), 88.0, T),
        (leaf("spo2", "between", [88, 92], "%"), 92.0, T),
        (leaf("spo2", "between", [88, 92], "%"), 87.9, F),
        (leaf("spo2", "between", [88, 92], "%"), 92.1, F),
        (leaf("spo2", "present", True), 50.0, T),
        (leaf("spo2", "present", False), 50.0, F),
    ],
)
def test_quantity_operator_compares_the_fact_with_its_threshold(
    when: dict[str, Any], value: float, expected: Truth
) -> None:
    assert _state(when, {"spo2": value}) is expected


@pytest.mark.parametrize("operator", ["lt", "le", "gt", "ge", "eq"])
def test_comparison_on_a_missing_fact_is_unknown(operator: str) -> None:
    assert _state(leaf("spo2", operator, 90, "%"), {}) is U


def test_between_on_a_missing_fact_is_unknown() -> None:
    assert _state(leaf("spo2", "between", [88, 92], "%"), {}) is U


@pytest.mark.parametrize(("expected", "state"), [(True, F), (False, T)])
def test_present_on_a_missing_fact_is_never_unknown(expected: bool, state: Truth) -> None:
    assert _state(leaf("spo2", "present", expected), {}) is state


def test_eq_tolerates_floating_point_noise_from_a_computation() -> None:
    assert _state(leaf("fio2", "eq", 0.21, "1"), {"fio2": 0.1 + 0.11}) is T


def test_threshold_from_a_parameter_uses_the_overridden_value() -> None:
    when = leaf("arterial_pco2", "gt", {"param": "hypercapnia_threshold"}, MMHG)
    ruleset = build(rules=[rule("r", when=when)], overrides={"hypercapnia_threshold": 50})
    assert evaluate(ruleset, {"arterial_pco2": 48.0}).result("r").state is F


def test_between_accepts_parameters_for_either_bound() -> None:
    when = leaf("arterial_pco2", "between", [35, {"param": "hypercapnia_threshold"}], MMHG)
    assert _state(when, {"arterial_pco2": 45.0}) is T
    assert _state(when, {"arterial_pco2": 45.1}) is F


@pytest.mark.parametrize(
    ("flag", "value", "expected"),
    [(True, True, T), (True, False, F), (False, False, T), (False, True, F)],
)
def test_is_compares_a_boolean_fact(flag: bool, value: bool, expected: Truth) -> None:
    assert _state({"fact": A, "is": flag}, {A: value}) is expected


def test_is_on_a_missing_boolean_is_unknown() -> None:
    assert _state(_is_true(A), {}) is U


@pytest.mark.parametrize(
    ("device", "expected"),
    [("ventilator", T), ("high-flow-nasal", T), ("nasal-cannula", F)],
)
def test_in_tests_a_code_fact_against_a_list(device: str, expected: Truth) -> None:
    when = {"fact": "oxygen_device", "in": ["ventilator", "high-flow-nasal"]}
    assert _state(when, {"oxygen_device": device}) is expected


def test_in_on_a_missing_code_is_unknown() -> None:
    assert _state({"fact": "oxygen_device", "in": ["ventilator"]}, {}) is U


AND_TABLE = [
    (T, T, T), (T, F, F), (T, U, U),
    (F, T, F), (F, F, F), (F, U, F),
    (U, T, U), (U, F, F), (U, U, U),
]  # fmt: skip
OR_TABLE = [
    (T, T, T), (T, F, T), (T, U, T),
    (F, T, T), (F, F, F), (F, U, U),
    (U, T, T), (U, F, U), (U, U, U),
]  # fmt: skip


@pytest.mark.parametrize(("left", "right", "expected"), AND_TABLE)
def test_all_follows_the_three_valued_and_table(left: Truth, right: Truth, expected: Truth) -> None:
    when = {"all": [_is_true(A), _is_true(B)]}
    assert _state(when, _facts_for(**{A: left, B: right})) is expected


@pytest.mark.parametrize(("left", "right", "expected"), OR_TABLE)
def test_any_follows_the_three_valued_or_table(left: Truth, right: Truth, expected: Truth) -> None:
    when = {"any": [_is_true(A), _is_true(B)]}
    assert _state(when, _facts_for(**{A: left, B: right})) is expected


@pytest.mark.parametrize(("inner", "expected"), [(T, F), (F, T), (U, U)])
def test_not_swaps_true_and_false_and_keeps_unknown(inner: Truth, expected: Truth) -> None:
    assert _state({"not": _is_true(A)}, _facts_for(**{A: inner})) is expected


# With false < unknown < true, `all` is the minimum and `any` the maximum of its parts.
_RANK = {F: 0, U: 1, T: 2}


@pytest.mark.parametrize("states", list(itertools.product([T, F, U], repeat=3)))
def test_three_part_all_and_any_are_minimum_and_maximum(states: tuple[Truth, ...]) -> None:
    facts = _facts_for(**dict(zip((A, B, C), states, strict=True)))
    parts = [_is_true(A), {"not": {"not": _is_true(B)}}, {"all": [_is_true(C)]}]
    assert _state({"all": parts}, facts) is min(states, key=_RANK.__getitem__)
    assert _state({"any": parts}, facts) is max(states, key=_RANK.__getitem__)


def test_a_block_is_compiled_once_and_shared_by_every_rule() -> None:
    ruleset = build(rules=[rule(f"r{i}", when={"ref": "hypercapnia"}) for i in range(3)])
    first = ruleset.rules[0].condition
    assert all(r.condition is first for r in ruleset.rules)


def test_identical_leaves_in_different_rules_share_one_leaf() -> None:
    same = leaf("spo2", "lt", 90, "%")
    ruleset = build(rules=[rule("a", when=same), rule("b", when={"not": same})])
    assert [leaf.fact for leaf in ruleset.leaves].count("spo2") == 1


def test_same_threshold_from_a_parameter_and_a_number_stays_two_leaves() -> None:
    # Kept apart so each trace names where its threshold came from.
    by_number = leaf("arterial_pco2", "gt", 45, MMHG)
    ruleset = build(rules=[rule("a", when={"ref": "hypercapnia"}), rule("b", when=by_number)])
    assert [leaf.parameters for leaf in ruleset.leaves] == [("hypercapnia_threshold",), ()]


def test_undecided_names_only_the_missing_facts_that_could_change_the_rule() -> None:
    when = {
        "any": [
            leaf("spo2", "lt", 90, "%"),
            {"all": [leaf("arterial_po2", "lt", 60, MMHG), leaf("fio2", "gt", 0.5, "1")]},
            {"all": [leaf("peep", "gt", 5, "cm[H2O]"), leaf("fio2", "gt", 0.9, "1")]},
        ]
    }
    # fio2 0.6 makes the third part false whatever PEEP is, so PEEP is not asked for.
    result = evaluate(build(rules=[rule("r", when=when)]), {"fio2": 0.6}).result("r")
    assert result.state is U
    assert result.undecided == ("spo2", "arterial_po2")
    assert result.missing == ("spo2", "arterial_po2", "peep")


def test_undecided_is_empty_when_the_rule_is_decided() -> None:
    when = {"all": [leaf("spo2", "lt", 90, "%"), leaf("fio2", "gt", 0.5, "1")]}
    result = evaluate(build(rules=[rule("r", when=when)]), {"fio2": 0.3}).result("r")
    assert result.state is F
    assert result.undecided == ()
    assert result.missing == ("spo2",)
