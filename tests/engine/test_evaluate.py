"""Evaluation results: states, lazy traces and rationales, shadow rules, fact checking."""

from pathlib import Path

import pytest

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine import (
    FactError,
    FindingOutcome,
    LeafTrace,
    Operator,
    Truth,
    evaluate,
    load_ruleset,
)
from service.engine.facts import FactValue

from .builders import MMHG, build, leaf, rule

SAMPLE = Path(__file__).parent / "data" / "sample"


def test_evaluation_carries_rule_set_identity_and_hash() -> None:
    ruleset = load_ruleset(SAMPLE, catalogue=DEFAULT_CATALOGUE)
    evaluation = evaluate(ruleset, {})
    assert evaluation.ruleset == "engine-test-sample|1.4.0"
    assert evaluation.content_hash == ruleset.content_hash


def test_every_active_and_testing_rule_gets_a_result_and_drafts_do_not() -> None:
    evaluation = evaluate(load_ruleset(SAMPLE, catalogue=DEFAULT_CATALOGUE), {"arterial_po2": 70.0})
    ids = {result.rule.id for result in evaluation.results}
    assert "diffusion-exertional" in ids
    assert "shunt-draft" not in ids
    assert "hypoventilation-old" not in ids
    assert [r.rule.id for r in evaluation.shadow_results] == ["diffusion-exertional"]
    with pytest.raises(KeyError):
        evaluation.result("shunt-draft")


def test_result_names_the_rule_as_id_at_version() -> None:
    evaluation = evaluate(load_ruleset(SAMPLE, catalogue=DEFAULT_CATALOGUE), {})
    assert evaluation.result("hypoventilation-alone").ref == "hypoventilation-alone@2.1.0"


def test_trace_lists_every_leaf_with_threshold_parameter_value_and_state() -> None:
    when = {
        "all": [
            {"ref": "hypercapnia"},
            leaf("aa_gradient_excess", "le", 0, MMHG),
            {"not": leaf("fio2", "between", [0.5, 1], "1")},
            {"fact": "oxygen_device", "in": ["ventilator", "nasal-cannula"]},
            {"fact": "fio2_estimated_from_flow", "is": True},
        ]
    }
    facts: dict[str, FactValue] = {
        "arterial_pco2": 52.0,
        "fio2": 0.28,
        "oxygen_device": "nasal-cannula",
    }
    result = evaluate(build(rules=[rule("r", when=when)]), facts).result("r")
    assert result.state is Truth.UNKNOWN
    assert result.trace == (
        LeafTrace("arterial_pco2", Operator.GT, 45.0, ("hypercapnia_threshold",), MMHG, 52.0,
                  Truth.TRUE, None),
        LeafTrace("aa_gradient_excess", Operator.LE, 0.0, (), MMHG, None, Truth.UNKNOWN,
                  "aa_gradient_excess"),
        LeafTrace("fio2", Operator.BETWEEN, (0.5, 1.0), (), "1", 0.28, Truth.FALSE, None),
        LeafTrace("oxygen_device", Operator.IN, ("nasal-cannula", "ventilator"), (), None,
                  "nasal-cannula", Truth.TRUE, None),
        LeafTrace("fio2_estimated_from_flow", Operator.IS, True, (), None, None, Truth.UNKNOWN,
                  "fio2_estimated_from_flow"),
    )  # fmt: skip


def test_trace_of_a_presence_test_names_the_missing_fact_but_is_decided() -> None:
    result = evaluate(build(rules=[rule("r")]), {}).result("r")
    [trace] = result.trace
    assert (trace.operator, trace.threshold, trace.state) == (Operator.PRESENT, False, Truth.TRUE)
    assert trace.missing == "arterial_pco2"


def test_result_exposes_its_rule_outcome() -> None:
    result = evaluate(build(rules=[rule("r")]), {}).result("r")
    assert isinstance(result.outcome, FindingOutcome)
    assert result.outcome.code == "paco2-missing"


def test_results_do_not_change_when_the_caller_edits_the_facts_afterwards() -> None:
    facts: dict[str, float | bool | str] = {"arterial_pco2": 50.0}
    evaluation = evaluate(build(rules=[rule("r", rationale="{arterial_pco2}")]), facts)
    facts["arterial_pco2"] = 20.0
    assert evaluation.result("r").rationale == "50.0 mmHg"
    assert evaluation.result("r").trace[0].value == 50.0


def test_evaluate_rejects_bad_facts_before_evaluating_anything() -> None:
    with pytest.raises(FactError) as caught:
        evaluate(build(rules=[rule("r")]), {"arterial_pco2": "high", "made_up": 1.0})
    assert [p.fact for p in caught.value.problems] == ["arterial_pco2", "made_up"]


def test_evaluating_twice_gives_equal_results() -> None:
    ruleset = load_ruleset(SAMPLE, catalogue=DEFAULT_CATALOGUE)
    facts = {"arterial_po2": 55.0, "arterial_pco2": 58.0, "aa_gradient_excess": -3.0}
    first, second = evaluate(ruleset, facts), evaluate(ruleset, facts)
    assert [r.state for r in first.results] == [r.state for r in second.results]
    assert first.verdict.pattern is second.verdict.pattern
