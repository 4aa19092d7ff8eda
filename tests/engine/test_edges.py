"""The engine's edges: where a range, a tolerance or an order is decided, pinned at the edge."""

from __future__ import annotations

import math

import pytest

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine import FactError, FindingCode, Grade, Mechanism, Pattern, Severity, evaluate
from service.engine.catalogue import FactCatalogue
from service.engine.facts import FactKind, FactSpec
from service.engine.leaves import leaf_test
from service.engine.logic import Operator
from service.engine.verdict import REPEAT_SAMPLE

from .builders import build, finding, leaf, manifest, mechanism, only_problem, rule

MMHG = "mm[Hg]"


@pytest.mark.parametrize(
    "facts",
    [
        {"arterial_gas_present": "yes"},  # a string for a boolean fact
        {"arterial_po2": True},  # a bool for a quantity fact
        {"oxygen_device": ["nasal-cannula"]},  # a list for a code fact
        {"oxygen_device": 3.0},
    ],
)
def test_the_quick_check_lets_no_wrong_kind_through(facts: dict[str, object]) -> None:
    with pytest.raises(FactError):
        DEFAULT_CATALOGUE.check(facts)


def test_a_fact_on_the_edge_of_its_range_is_accepted() -> None:
    spec = DEFAULT_CATALOGUE["spo2"]
    assert spec.minimum is not None and spec.maximum is not None
    DEFAULT_CATALOGUE.check({"spo2": spec.minimum, "fio2": 1.0, "arterial_ph": 8.0})
    assert spec.problem(spec.maximum) is None and spec.problem(spec.minimum) is None
    assert spec.problem(spec.maximum + 0.01) is not None
    assert DEFAULT_CATALOGUE["oxygen_device"].problem("nasal-cannula") is None
    assert DEFAULT_CATALOGUE["oxygen_device"].problem("hood") is not None


def test_an_unbounded_quantity_is_still_checked_for_finiteness() -> None:
    catalogue = FactCatalogue(
        [FactSpec("x", FactKind.QUANTITY, "1", "x", -math.inf, math.inf, decimals=2)]
    )
    catalogue.check({"x": 1e300})
    with pytest.raises(FactError):
        catalogue.check({"x": math.nan})


def test_a_range_needs_a_minimum_below_its_maximum() -> None:
    with pytest.raises(ValueError, match="below maximum"):
        FactSpec("x", FactKind.QUANTITY, "1", "x", 1.0, 1.0)


def test_a_threshold_on_the_edge_of_the_facts_range_is_accepted() -> None:
    build(rules=[rule("edge", when=leaf("spo2", "le", 100, "%"))])
    build(rules=[rule("floor", when=leaf("spo2", "ge", 2, "%"))])
    only_problem(rules=[rule("below", when=leaf("spo2", "ge", 1.9, "%"))])
    problem = only_problem(rules=[rule("past", when=leaf("spo2", "le", 101, "%"))])
    assert "outside the accepted range" in problem.message


def test_between_with_equal_bounds_is_a_single_value() -> None:
    build(rules=[rule("pinned", when=leaf("fio2", "between", [0.5, 0.5], "1"))])


def test_an_unknown_parameter_names_the_known_ones_or_none() -> None:
    bare = manifest(parameters={}, blocks={})
    when = {"fact": "spo2", "lt": {"param": "missing"}, "unit": "%"}
    problem = only_problem(bare, [rule("r", when=when)])
    assert problem.hint.endswith("known: none")


def test_a_misspelt_fact_suggests_at_most_three_names() -> None:
    problem = only_problem(rules=[rule("r", when=leaf("arterial_", "gt", 0, MMHG))])
    suggested = problem.message.split("did you mean ")[1].rstrip(")").split(", ")
    assert len(suggested) == 3


# A leaf with a unit problem is not checked further: its threshold, read in the wrong unit,
# would only add a misleading second problem.
def test_a_unit_on_a_code_fact_is_one_problem() -> None:
    when = {"fact": "oxygen_device", "in": ["hood"], "unit": "1"}
    assert "has no unit" in only_problem(rules=[rule("r", when=when)]).message


def test_a_comparison_without_its_unit_is_one_problem() -> None:
    when = {"fact": "spo2", "lt": 0.9}
    assert "has no unit" in only_problem(rules=[rule("r", when=when)]).message


def test_a_comparison_in_another_unit_is_one_problem() -> None:
    when = {"fact": "spo2", "lt": 0.9, "unit": "1"}
    assert "differs from the catalogue unit" in only_problem(rules=[rule("r", when=when)]).message


def test_a_misspelt_block_suggests_at_most_three_names() -> None:
    blocks = {f"low_{x}": leaf("spo2", "lt", 90, "%") for x in "abcd"}
    problem = only_problem(manifest(blocks=blocks), [rule("r", when={"ref": "low_"})])
    suggested = problem.message.split("did you mean ")[1].rstrip("?)").split(", ")
    assert len(suggested) == 3


def test_eq_tolerates_a_billionth_and_no_more() -> None:
    # README: eq tolerates floating-point noise (relative 1e-9, absolute 1e-12 near zero).
    near = leaf_test("fio2", Operator.EQ, 0.21)
    assert near({"fio2": 0.21 * (1 + 0.9e-9)}) is True
    assert near({"fio2": 0.21 * (1 + 1.05e-9)}) is False
    zero = leaf_test("x", Operator.EQ, 0.0)
    assert zero({"x": 0.95e-12}) is True
    assert zero({"x": 1.05e-12}) is False


def test_findings_come_errors_first_then_warnings_then_information() -> None:
    # Codes chosen so that an order by code alone would differ from the order by severity.
    rules = [
        rule(
            "a",
            outcome=finding("acid-base-inconsistent", "information"),
            when=leaf("spo2", "gt", 50, "%"),
        ),
        rule(
            "b",
            outcome=finding("pb-assumed-sea-level", "warning"),
            when=leaf("spo2", "gt", 50, "%"),
        ),
        rule("c", outcome=finding("specimen-unknown", "error"), when=leaf("spo2", "gt", 50, "%")),
        rule("d", outcome=finding("dyshaemoglobin", "warning"), when=leaf("spo2", "gt", 50, "%")),
    ]
    verdict = evaluate(build(rules=rules), {"spo2": 95.0}).verdict
    assert [(f.severity, f.code) for f in verdict.findings] == [
        (Severity.ERROR, FindingCode.SPECIMEN_UNKNOWN),
        (Severity.WARNING, FindingCode.DYSHAEMOGLOBIN),
        (Severity.WARNING, FindingCode.PB_ASSUMED_SEA_LEVEL),
        (Severity.INFORMATION, FindingCode.ACID_BASE_INCONSISTENT),
    ]


def test_evaluations_are_equal_exactly_when_their_results_are() -> None:
    # A testing rule changes no verdict, yet its result is part of the evaluation.
    shadow = rule("s", status="testing", when=leaf("spo2", "lt", 90, "%"))
    ruleset = build(rules=[shadow])
    low, high = evaluate(ruleset, {"spo2": 88.0}), evaluate(ruleset, {"spo2": 95.0})
    assert low.verdict == high.verdict
    assert low != high
    assert low == evaluate(ruleset, {"spo2": 85.0})


def test_a_trace_line_shows_the_value_its_unit_and_the_test() -> None:
    rules = [
        rule(
            "t",
            when={
                "all": [
                    leaf("arterial_pco2", "gt", 45, MMHG),
                    leaf("fio2", "ge", 0.3, "1"),
                    {"fact": "spo2", "present": True},
                ]
            },
        )
    ]
    evaluation = evaluate(build(rules=rules), {"arterial_pco2": 52.0, "fio2": 0.5})
    assert evaluation.result("t").trace_lines == (
        "t@1.0.0: arterial_pco2 52 mm[Hg] > 45 mm[Hg] → true",
        "t@1.0.0: fio2 0.5 ≥ 0.3 → true",
        "t@1.0.0: spo2 missing present is true → false",
    )


def test_a_mechanism_no_rule_decided_says_what_was_missing() -> None:
    rules = [
        rule(
            "m", outcome=mechanism("shunt", "likely", 1), when=leaf("shunt_fraction", "gt", 20, "%")
        )
    ]
    verdict = evaluate(build(rules=rules), {"arterial_po2": 60.0}).verdict
    shunt = verdict.assessment(Mechanism.SHUNT)
    assert shunt.undecided == ("shunt_fraction",)
    assert shunt.rationales == ("Not assessable: missing shunt_fraction",)
    nothing = evaluate(build(rules=rules), {"arterial_po2": 60.0, "shunt_fraction": 5.0}).verdict
    assert nothing.assessment(Mechanism.SHUNT).rationales == (
        "Not assessable: no rule applied to these data",
    )


def test_an_error_met_before_the_rules_demotes_and_asks_for_a_repeat_gas() -> None:
    rules = [
        rule(
            "m", outcome=mechanism("shunt", "likely", 1), when=leaf("arterial_po2", "lt", 80, MMHG)
        )
    ]
    ruleset = build(rules=rules)
    trusted = evaluate(ruleset, {"arterial_po2": 60.0}).verdict
    assert trusted.grade(Mechanism.SHUNT) is Grade.LIKELY and trusted.data_requested == ()
    doubted = evaluate(ruleset, {"arterial_po2": 60.0}, input_errors=["value-out-of-range"]).verdict
    assert doubted.pattern is Pattern.NOT_CLASSIFIABLE
    shunt = doubted.assessment(Mechanism.SHUNT)
    assert shunt.grade is Grade.POSSIBLE and shunt.demoted
    assert shunt.rationales[-1] == (
        "Demoted from likely to possible: the gas is not classifiable "
        "(error in the input: value-out-of-range)."
    )
    assert shunt.discriminators == (REPEAT_SAMPLE,)
    # Asked for although PaO2 is known: the request is for a new, trusted value.
    assert [r.fact for r in doubted.data_requested] == list(REPEAT_SAMPLE.requests)
    assert all(r.requested_by == () for r in doubted.data_requested)
