"""The result classes built per evaluation: quick constructors, lazy results, same answers."""

import dataclasses
from pathlib import Path
from typing import Any

import pytest

from service.engine import (
    DataRequest,
    FindingResult,
    MechanismAssessment,
    RuleResult,
    Verdict,
    evaluate,
    load_ruleset,
)
from service.engine.facts import FactValue
from service.engine.results import EvaluationContext
from service.engine.verdict import decide

SAMPLE = Path(__file__).parent / "data" / "sample"
RULES = Path(__file__).resolve().parents[2] / "rules"
# Classes whose __init__ sets the slots itself (service/engine/slots.py).
QUICK = [EvaluationContext, RuleResult, MechanismAssessment, FindingResult, Verdict, DataRequest]


@pytest.mark.parametrize("cls", QUICK, ids=lambda cls: cls.__name__)
def test_quick_init_sets_every_field(cls: type) -> None:
    fields = dataclasses.fields(cls)
    given = {field.name: object() for field in fields}
    made = cls(**given)
    assert all(getattr(made, name) is value for name, value in given.items())
    required = {f.name: given[f.name] for f in fields if f.default is dataclasses.MISSING}
    bare = cls(**required)
    for field in fields:
        if field.default is not dataclasses.MISSING:
            assert getattr(bare, field.name) == field.default


@pytest.mark.parametrize("cls", QUICK, ids=lambda cls: cls.__name__)
def test_quick_init_keeps_the_class_frozen(cls: type) -> None:
    fields = dataclasses.fields(cls)
    made: Any = cls(**{field.name: 1 for field in fields})
    with pytest.raises(dataclasses.FrozenInstanceError):
        made.__setattr__(fields[0].name, 2)


FACTS: dict[str, FactValue] = {
    "arterial_po2": 55.0,
    "arterial_pco2": 58.0,
    "aa_gradient_excess": -3.0,
    "fio2": 0.21,
}


@pytest.mark.parametrize("directory", [SAMPLE, RULES], ids=["sample", "shipped"])
def test_the_verdict_cites_the_same_result_objects_as_results(directory: Path) -> None:
    evaluation = evaluate(load_ruleset(directory), FACTS)
    by_id = {result.rule.id: result for result in evaluation.results}
    for item in evaluation.verdict.mechanisms:
        for result in item.deciding + item.losing:
            assert by_id[result.rule.id] is result
    for finding in evaluation.verdict.findings:
        assert by_id[finding.result.rule.id] is finding.result


@pytest.mark.parametrize("directory", [SAMPLE, RULES], ids=["sample", "shipped"])
def test_decide_on_loose_results_gives_the_verdict_of_evaluate(directory: Path) -> None:
    ruleset = load_ruleset(directory)
    for facts in ({}, FACTS, {**FACTS, "spo2": 0.85, "arterial_so2": 0.84}):
        evaluation = evaluate(ruleset, facts)
        assert decide(evaluation.results, facts, ruleset.catalogue) == evaluation.verdict


def test_evaluations_of_the_same_facts_are_equal() -> None:
    ruleset = load_ruleset(SAMPLE)
    first, second = evaluate(ruleset, FACTS), evaluate(ruleset, FACTS)
    assert first == second
    assert hash(first.verdict) == hash(second.verdict)
    assert first.results == second.results
