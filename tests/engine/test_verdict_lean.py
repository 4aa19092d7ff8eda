"""What a verdict names beside its grades - the discriminators of the deciding rules, and
every field of the verdict that ``combine`` does not work out again - whether one rule or
several decided, and however the verdict was put together.

Properties of the engine's own code (the one-rule shortcut and the combined verdict built
field by field), not clinical checks.
"""

from dataclasses import fields
from typing import Any

from service.engine import Grade, Mechanism, evaluate
from service.engine.facts import FactValue
from service.engine.ruleset import Discriminator
from service.engine.scenarios import Scenario, Uncertainty, combine
from service.engine.verdict import Verdict

from .builders import build, mechanism, rule

OXYGENATED: dict[str, FactValue] = {"arterial_po2": 58.0, "peep": 5.0, "respiratory_rate": 20.0}
FIRST = {"text": "A mixed venous gas.", "requests": ["mixed_venous_po2"]}
SECOND = {"text": "A second gas on more oxygen.", "requests": ["fio2_step"]}


def _possible(rule_id: str, fact: str, discriminator: dict[str, Any] | None) -> dict[str, Any]:
    extra = {"discriminator": discriminator} if discriminator is not None else {}
    return rule(
        rule_id,
        outcome=mechanism("shunt", "possible", 1),
        when={"fact": fact, "present": True},
        rationale=f"{rule_id} fired.",
        **extra,
    )


def _shunt(rules: list[dict[str, Any]]):  # type: ignore[no-untyped-def]
    return evaluate(build(rules=rules), OXYGENATED).verdict.assessment(Mechanism.SHUNT)


def test_one_deciding_rule_names_its_discriminator() -> None:
    shunt = _shunt([_possible("a", "peep", FIRST)])
    assert shunt.discriminators == (Discriminator("A mixed venous gas.", ("mixed_venous_po2",)),)


def test_two_deciding_rules_name_both_discriminators_in_rule_order() -> None:
    shunt = _shunt([_possible("a", "peep", FIRST), _possible("b", "respiratory_rate", SECOND)])
    assert [d.text for d in shunt.discriminators] == [FIRST["text"], SECOND["text"]]


def test_deciding_rules_with_the_same_discriminator_name_it_once() -> None:
    shunt = _shunt([_possible("a", "peep", FIRST), _possible("b", "respiratory_rate", FIRST)])
    assert [d.text for d in shunt.discriminators] == [FIRST["text"]]


def test_a_grade_no_rule_decided_names_no_discriminator() -> None:
    verdict = evaluate(build(rules=[]), OXYGENATED).verdict
    assert [m.discriminators for m in verdict.mechanisms] == [()] * 5
    assert {m.grade for m in verdict.mechanisms} == {Grade.NOT_ASSESSABLE}


def test_a_combined_verdict_keeps_every_field_it_does_not_work_out_again() -> None:
    ruleset = build(
        rules=[
            _possible("a", "peep", FIRST),
            rule(
                "low",
                outcome={"hypoxaemia": "present"},
                when={"fact": "arterial_po2", "lt": 60, "unit": "mm[Hg]"},
                rationale="Low.",
            ),
        ]
    )
    representative = evaluate(ruleset, OXYGENATED)
    scenario = Scenario("other", evaluate(ruleset, {**OXYGENATED, "arterial_po2": 59.0}))
    settle = Discriminator("Measure it.", ("fio2",))
    combined = combine(representative, [scenario], [Uncertainty("FiO2", settle)])
    worked_out = {
        "pattern",
        "pattern_reason",
        "hypoxaemia",
        "gas_exchange",
        "mechanisms",
        "findings",
        "data_requested",
    }
    kept = [f.name for f in fields(Verdict) if f.name not in worked_out]
    assert kept == ["hypoxaemia_rules", "gas_exchange_rules"]
    for name in kept:
        assert getattr(combined, name) == getattr(representative.verdict, name)
    assert combined.hypoxaemia_rules == ("low@1.0.0",)
