"""What the assessment shows of each mechanism (``assess._mechanism``): the deciding rules'
rationales joined, their refs, their discriminators' sentences and every trace line, whether
one rule decided (the usual case, read straight from its result), two tied at the winning
priority, or none fired (not assessable, naming what was missing).

These are properties of the project's own mapping from the engine's verdict to the
Assessment, not clinical checks: the rules and values are invented for the test.
"""

from __future__ import annotations

from service.assess.assess import _mechanism
from service.engine import Grade, Mechanism, evaluate
from service.engine.rationale import NO_UNITS
from tests.engine.builders import build, leaf, mechanism, rule

RULES = [
    rule(
        "shunt-a",
        outcome=mechanism("shunt", "possible", 1),
        when=leaf("arterial_pco2", "gt", 45, "mm[Hg]"),
        rationale="PaCO2 is {arterial_pco2}.",
        discriminator={"text": "A gas on more oxygen.", "requests": ["arterial_po2"]},
    ),
    rule(
        "shunt-b",
        outcome=mechanism("shunt", "possible", 1),
        when=leaf("fio2", "ge", 0.3, "1"),
        rationale="FiO2 is {fio2}.",
        discriminator={"text": "A shunt study.", "requests": ["shunt_fraction"]},
    ),
    rule(
        "vq",
        outcome=mechanism("vq-mismatch", "likely", 1),
        when=leaf("shunt_fraction", "gt", 20, "%"),
        rationale="Shunt fraction is {shunt_fraction}.",
    ),
]


def test_two_rules_tied_at_the_winning_priority_are_both_shown() -> None:
    verdict = evaluate(build(rules=RULES), {"arterial_pco2": 52.0, "fio2": 0.5}).verdict
    shown = _mechanism(verdict.assessment(Mechanism.SHUNT), NO_UNITS)
    assert shown.grade is Grade.POSSIBLE
    assert shown.rules == ("shunt-a@1.0.0", "shunt-b@1.0.0")
    assert shown.rationale == "PaCO2 is 52.0 mmHg. FiO2 is 0.50."
    assert shown.discriminator == "A gas on more oxygen. A shunt study."
    assert shown.trace == (
        "shunt-a@1.0.0: arterial_pco2 52 mm[Hg] > 45 mm[Hg] → true",
        "shunt-b@1.0.0: fio2 0.5 ≥ 0.3 → true",
    )


def test_a_mechanism_no_rule_fired_for_names_what_was_missing() -> None:
    verdict = evaluate(build(rules=RULES), {"arterial_pco2": 52.0, "fio2": 0.5}).verdict
    shown = _mechanism(verdict.assessment(Mechanism.VQ_MISMATCH), NO_UNITS)
    assert shown.grade is Grade.NOT_ASSESSABLE
    assert (shown.rules, shown.discriminator, shown.trace) == ((), None, ())
    assert shown.rationale == "Not assessable: missing shunt_fraction"


def test_one_deciding_rule_is_shown_as_its_result_has_it() -> None:
    facts = {"arterial_po2": 60.0, "arterial_pco2": 52.0, "fio2": 0.5, "shunt_fraction": 25.0}
    verdict = evaluate(build(rules=RULES), facts).verdict
    shown = _mechanism(verdict.assessment(Mechanism.VQ_MISMATCH), NO_UNITS)
    assert shown.grade is Grade.LIKELY
    assert shown.rules == ("vq@1.0.0",)
    assert shown.rationale == "Shunt fraction is 25%."
    assert shown.discriminator is None
    assert shown.trace == ("vq@1.0.0: shunt_fraction 25 % > 20 % → true",)
