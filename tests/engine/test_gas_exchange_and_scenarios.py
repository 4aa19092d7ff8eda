"""Rule set 2.0 engine parts: `definitely`, the gas-exchange status, the pattern when one
mechanism is likely beside a defect of open type, comparisons at stated precision, and one
verdict from several evaluations under uncertain inputs (service/engine/scenarios.py)."""

from typing import Any

import pytest

from service.engine import (
    Evaluation,
    Grade,
    HypoxaemiaStatus,
    Mechanism,
    Pattern,
    Truth,
    evaluate,
)
from service.engine.facts import FactValue
from service.engine.ruleset import Discriminator
from service.engine.scenarios import Scenario, Uncertainty, combine
from service.engine.verdict import MechanismAssessment, pattern_of
from service.engine.vocabulary import GasExchangeStatus

from .builders import MMHG, build, finding, leaf, mechanism, rule

T, F, U = Truth.TRUE, Truth.FALSE, Truth.UNKNOWN


def _state(when: dict[str, Any], facts: dict[str, FactValue]) -> Truth:
    return evaluate(build(rules=[rule("r", when=when)]), facts).result("r").state


# --- definitely ------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("facts", "plain", "definite", "negated"),
    [
        ({"arterial_po2": 50.0}, T, T, F),
        ({"arterial_po2": 70.0}, F, F, T),
        ({}, U, F, T),  # the check could not be made: no evidence, not "unknown"
    ],
)
def test_definitely_is_true_only_when_its_condition_is_true(
    facts: dict[str, FactValue], plain: Truth, definite: Truth, negated: Truth
) -> None:
    low = leaf("arterial_po2", "lt", 60, MMHG)
    assert _state(low, facts) is plain
    assert _state({"definitely": low}, facts) is definite
    assert _state({"not": {"definitely": low}}, facts) is negated


# --- comparisons at the stated precision -----------------------------------------------------


def test_a_value_is_compared_as_stated_not_as_its_binary_noise() -> None:
    # 6.0 kPa is 45.0037 mmHg (1 kPa = 7.50062 mmHg, BIPM SI brochure 2019): stated to one
    # decimal it is 45.0, which is not above 45.
    assert _state(leaf("arterial_pco2", "gt", 45, MMHG), {"arterial_pco2": 6.0 * 7.50062}) is F
    assert _state(leaf("arterial_pco2", "gt", 45, MMHG), {"arterial_pco2": 45.06}) is T
    # A fall from 94 % to 90 % computed in binary is 3.9999...: it meets a 4-point line.
    fall = (0.94 - 0.90) * 100
    assert fall < 4.0
    assert (
        _state(leaf("exertional_desaturation", "ge", 4, "%"), {"exertional_desaturation": fall})
        is T
    )


# --- the gas-exchange status -----------------------------------------------------------------


def _exchange_rules() -> list[dict[str, Any]]:
    return [
        rule(
            "defect",
            outcome={"gas_exchange": "defect"},
            when=leaf("aa_gradient_excess", "gt", 0, MMHG),
            rationale="Raised.",
        ),
        rule(
            "normal",
            outcome={"gas_exchange": "normal"},
            when=leaf("aa_gradient_excess", "le", 0, MMHG),
            rationale="Normal.",
        ),
        rule(
            "hypoventilation",
            outcome=mechanism("hypoventilation", "likely", 10),
            when=leaf("arterial_pco2", "gt", 45, MMHG),
            rationale="High PaCO2.",
        ),
        rule(
            "vq",
            outcome=mechanism("vq-mismatch", "possible", 20),
            when=leaf("aa_gradient_excess", "gt", 0, MMHG),
            rationale="Open type.",
            discriminator={"text": "A gas on more oxygen.", "requests": ["mixed_venous_po2"]},
        ),
    ]


@pytest.mark.parametrize(
    ("excess", "status", "pattern"),
    [
        # Hypoventilation with a raised A-a gradient: a second, gas-exchange cause is open
        # (West JB, Respiratory Physiology, the causes of hypoxaemia: pure hypoventilation
        # keeps the A-a gradient normal).
        (15.0, GasExchangeStatus.DEFECT, Pattern.MIXED),
        (-5.0, GasExchangeStatus.NORMAL, Pattern.SINGLE),
        (None, GasExchangeStatus.UNKNOWN, Pattern.MIXED),
    ],
)
def test_one_likely_ventilatory_cause_is_single_only_when_gas_exchange_is_normal(
    excess: float | None, status: GasExchangeStatus, pattern: Pattern
) -> None:
    facts: dict[str, FactValue] = {"arterial_po2": 50.0, "arterial_pco2": 70.0}
    if excess is not None:
        facts["aa_gradient_excess"] = excess
    verdict = evaluate(build(rules=_exchange_rules()), facts).verdict
    assert verdict.gas_exchange is status
    assert verdict.pattern is pattern
    if status is GasExchangeStatus.DEFECT:
        assert verdict.gas_exchange_rules == ("defect@1.0.0",)
        assert verdict.pattern_reason == (
            "hypoventilation is likely beside a gas-exchange defect of open type "
            "(vq-mismatch possible)"
        )
    if status is GasExchangeStatus.UNKNOWN:
        assert verdict.pattern_reason == (
            "hypoventilation is likely; gas exchange could not be judged, so a second cause is open"
        )


def test_a_defect_wins_when_both_statuses_are_said() -> None:
    rules = [
        rule("d", outcome={"gas_exchange": "defect"}, when=leaf("spo2", "lt", 90, "%")),
        rule("n", outcome={"gas_exchange": "normal"}, when=leaf("spo2", "lt", 95, "%")),
    ]
    verdict = evaluate(build(rules=rules), {"arterial_po2": 55.0, "spo2": 85.0}).verdict
    assert verdict.gas_exchange is GasExchangeStatus.DEFECT


def _assessed(mechanism_: Mechanism, grade: Grade) -> MechanismAssessment:
    return MechanismAssessment(mechanism_, grade)


def test_a_likely_gas_exchange_mechanism_is_single_whatever_the_status() -> None:
    for status in GasExchangeStatus:
        pattern, _ = pattern_of(
            None,
            HypoxaemiaStatus.PRESENT,
            status,
            [
                _assessed(Mechanism.SHUNT, Grade.LIKELY),
                _assessed(Mechanism.VQ_MISMATCH, Grade.POSSIBLE),
            ],
        )
        assert pattern is Pattern.SINGLE


def test_not_assessable_grades_come_from_rules() -> None:
    rules = [
        rule(
            "na",
            outcome=mechanism("shunt", "not-assessable", 5),
            when={"fact": "fio2", "present": False},
            rationale="No FiO2.",
        )
    ]
    verdict = evaluate(build(rules=rules), {"arterial_po2": 55.0}).verdict
    item = verdict.assessment(Mechanism.SHUNT)
    assert item.grade is Grade.NOT_ASSESSABLE
    assert item.rules == ("na@1.0.0",)
    assert item.rationales == ("No FiO2.",)  # the rule's reason, not "no rule applied"


# --- scenarios -------------------------------------------------------------------------------


def _ruleset() -> Any:
    return build(rules=_base_rules())


def _base_rules() -> list[dict[str, Any]]:
    return [
        rule(
            "low-inspired",
            outcome=mechanism("low-inspired-oxygen", "likely", 10),
            when=leaf("inspired_po2", "lt", 120, MMHG),
            rationale="Low PIO2.",
        ),
        rule(
            "low-inspired-no",
            outcome=mechanism("low-inspired-oxygen", "unlikely", 20),
            when=leaf("inspired_po2", "ge", 120, MMHG),
            rationale="Normal PIO2.",
        ),
        rule(
            "shunt",
            outcome=mechanism("shunt", "likely", 10),
            when=leaf("fio2", "ge", 0.9, "1"),
            rationale="On near-pure oxygen.",
        ),
        rule(
            "shunt-no",
            outcome=mechanism("shunt", "unlikely", 20),
            when=leaf("fio2", "lt", 0.9, "1"),
            rationale="Less oxygen.",
        ),
        rule(
            "bad",
            outcome=finding("pao2-exceeds-alveolar", "error"),
            when=leaf("aa_gradient", "lt", -10, MMHG),
            rationale="Impossible.",
        ),
    ]


def _evaluation(**facts: FactValue) -> Evaluation:
    return evaluate(_ruleset(), {"arterial_po2": 55.0, **facts})


SETTLE = Discriminator("Send the measured FiO2.", ("fio2",))


def test_a_grade_that_differs_across_the_range_becomes_possible_and_says_why() -> None:
    representative = _evaluation(fio2=0.95, inspired_po2=150.0)
    scenarios = [
        Scenario("FiO2 0.85", _evaluation(fio2=0.85, inspired_po2=150.0)),
        Scenario("FiO2 1.0", _evaluation(fio2=1.0, inspired_po2=150.0)),
    ]
    verdict = combine(representative, scenarios, [Uncertainty("FiO2 (estimated)", SETTLE)])
    shunt = verdict.assessment(Mechanism.SHUNT)
    assert shunt.grade is Grade.POSSIBLE
    assert "FiO2 (estimated)" in (shunt.uncertain_because or "")
    assert "unlikely with FiO2 0.85" in (shunt.uncertain_because or "")
    assert shunt.settled_by == (SETTLE,)
    assert "fio2" in [r.fact for r in verdict.data_requested]
    # A grade that holds everywhere is kept.
    assert verdict.grade(Mechanism.LOW_INSPIRED_OXYGEN) is Grade.UNLIKELY


def test_a_scenario_bearing_only_on_one_mechanism_leaves_the_others_alone() -> None:
    representative = _evaluation(fio2=0.95, inspired_po2=150.0)
    pressure = Scenario(
        "pressure at altitude",
        _evaluation(fio2=0.5, inspired_po2=100.0),
        only_for=frozenset({Mechanism.LOW_INSPIRED_OXYGEN}),
    )
    verdict = combine(
        representative,
        [pressure],
        [
            Uncertainty(
                "barometric pressure (assumed)", SETTLE, frozenset({Mechanism.LOW_INSPIRED_OXYGEN})
            )
        ],
    )
    assert verdict.grade(Mechanism.SHUNT) is Grade.LIKELY  # not touched by the scenario
    assert verdict.grade(Mechanism.LOW_INSPIRED_OXYGEN) is Grade.POSSIBLE


def test_scenarios_the_data_refute_are_dropped() -> None:
    # At FiO2 0.5 this PaO2 would exceed the alveolar PO2: that end of the range is refuted.
    representative = _evaluation(fio2=0.95, inspired_po2=150.0, aa_gradient=200.0)
    refuted = Scenario("FiO2 0.5", _evaluation(fio2=0.5, inspired_po2=150.0, aa_gradient=-40.0))
    kept = Scenario("FiO2 1.0", _evaluation(fio2=1.0, inspired_po2=150.0, aa_gradient=230.0))
    verdict = combine(representative, [refuted, kept], [Uncertainty("FiO2", SETTLE)])
    assert verdict.grade(Mechanism.SHUNT) is Grade.LIKELY
    assert not any(f.code == "pao2-exceeds-alveolar" for f in verdict.findings)


def test_a_missing_input_does_not_vote_when_the_representative_does_not_count() -> None:
    # FiO2 not sent: the representative has no FiO2 and grades nothing for shunt; the
    # scenarios at both ends agree, so their grade stands.
    representative = _evaluation(inspired_po2=150.0)
    scenarios = [
        Scenario("FiO2 0.9", _evaluation(fio2=0.9, inspired_po2=150.0)),
        Scenario("FiO2 1.0", _evaluation(fio2=1.0, inspired_po2=150.0)),
    ]
    verdict = combine(
        representative, scenarios, [Uncertainty("FiO2", SETTLE)], representative_counts=False
    )
    assert verdict.grade(Mechanism.SHUNT) is Grade.LIKELY
    assert verdict.pattern is Pattern.SINGLE


# --- combine(), part by part (the engine's own contract; invented rules) ----------------------

_EXTRA = [
    rule(
        "low",
        outcome={"hypoxaemia": "present"},
        when=leaf("arterial_po2", "lt", 60, MMHG),
        rationale="Low.",
    ),
    rule(
        "fine",
        outcome={"hypoxaemia": "absent"},
        when=leaf("arterial_po2", "ge", 80, MMHG),
        rationale="Fine.",
    ),
    rule(
        "thin-air",
        outcome=finding("pb-assumed-sea-level", "warning"),
        when=leaf("inspired_po2", "lt", 120, MMHG),
        rationale="Thin air.",
    ),
    rule(
        "fast",
        outcome=finding("fio2-time-mismatch", "warning"),
        when=leaf("respiratory_rate", "gt", 30, "/min"),
        rationale="Fast.",
    ),
    rule(
        "venous",
        outcome=mechanism("vq-mismatch", "likely", 10),
        when=leaf("mixed_venous_po2", "lt", 30, MMHG),
        rationale="Low venous PO2.",
    ),
]
WIDER = build(rules=[*_base_rules(), *_EXTRA])
SETTLE_PRESSURE = Discriminator("Send the pressure.", ("barometric_pressure",))


def _wide(**facts: FactValue) -> Evaluation:
    return evaluate(WIDER, {"arterial_po2": 55.0, "fio2": 0.95, "inspired_po2": 150.0, **facts})


def _codes(verdict: Any) -> list[str]:
    return [str(f.code) for f in verdict.findings]


def test_hypoxaemia_stands_only_where_every_scenario_agrees() -> None:
    agreed = combine(_wide(), [Scenario("a", _wide()), Scenario("b", _wide(fio2=1.0))], [])
    assert agreed.hypoxaemia is HypoxaemiaStatus.PRESENT
    differing = combine(_wide(), [Scenario("a", _wide(arterial_po2=85.0))], [])
    assert differing.hypoxaemia is HypoxaemiaStatus.UNKNOWN
    # A scenario bearing on one mechanism only has no say on hypoxaemia.
    narrow = Scenario(
        "pressure", _wide(arterial_po2=85.0), only_for=frozenset({Mechanism.LOW_INSPIRED_OXYGEN})
    )
    assert combine(_wide(), [narrow], []).hypoxaemia is HypoxaemiaStatus.PRESENT


def test_a_refuted_representative_gives_way_to_a_standing_scenario() -> None:
    # The values as sent raise an error (FiO2 0.5 is refuted by the PaO2); both ends that
    # stand grade shunt likely: the refuted values neither vote nor show their error.
    representative = _wide(fio2=0.5, aa_gradient=-40.0)
    assert representative.verdict.pattern is Pattern.NOT_CLASSIFIABLE
    verdict = combine(
        representative,
        [Scenario("FiO2 0.95", _wide(aa_gradient=200.0)), Scenario("FiO2 1.0", _wide(fio2=1.0))],
        [Uncertainty("FiO2", SETTLE)],
    )
    assert verdict.grade(Mechanism.SHUNT) is Grade.LIKELY
    assert "pao2-exceeds-alveolar" not in _codes(verdict)
    assert verdict.pattern is not Pattern.NOT_CLASSIFIABLE


def test_a_scenario_that_cannot_assess_a_mechanism_says_nothing_against_the_others() -> None:
    # At one end no shunt rule applies (not-assessable): the others, which agree, decide.
    blind = evaluate(WIDER, {"arterial_po2": 55.0, "inspired_po2": 150.0})
    assert blind.verdict.grade(Mechanism.SHUNT) is Grade.NOT_ASSESSABLE
    verdict = combine(
        _wide(), [Scenario("blind", blind), Scenario("FiO2 1.0", _wide(fio2=1.0))], []
    )
    assert verdict.grade(Mechanism.SHUNT) is Grade.LIKELY


def test_only_the_uncertainties_bearing_on_a_mechanism_explain_it() -> None:
    uncertainties = [
        Uncertainty("FiO2 (estimated)", SETTLE),
        Uncertainty(
            "barometric pressure (assumed)",
            SETTLE_PRESSURE,
            frozenset({Mechanism.LOW_INSPIRED_OXYGEN}),
        ),
    ]
    verdict = combine(_wide(), [Scenario("FiO2 0.85", _wide(fio2=0.85))], uncertainties)
    shunt = verdict.assessment(Mechanism.SHUNT)
    assert shunt.grade is Grade.POSSIBLE
    assert shunt.uncertain_because is not None
    assert "FiO2 (estimated)" in shunt.uncertain_because
    assert "barometric" not in shunt.uncertain_because
    assert shunt.settled_by == (SETTLE,)
    assert "barometric_pressure" not in [r.fact for r in verdict.data_requested]


def test_a_finding_raised_everywhere_is_shown_once_and_one_raised_somewhere_is_not() -> None:
    thin = _wide(inspired_po2=100.0)
    both = combine(thin, [Scenario("a", thin), Scenario("b", thin)], [])
    assert _codes(both).count("pb-assumed-sea-level") == 1
    # The representative lacks the input (does not count): a finding every scenario raises
    # is shown; one raised by only one scenario is not, whatever the other raised instead.
    missing = evaluate(WIDER, {"arterial_po2": 55.0, "fio2": 0.95})
    everywhere = combine(
        missing,
        [Scenario("a", thin), Scenario("b", _wide(inspired_po2=110.0))],
        [],
        representative_counts=False,
    )
    assert _codes(everywhere) == ["pb-assumed-sea-level"]
    somewhere = combine(
        missing,
        [Scenario("a", thin), Scenario("b", _wide(respiratory_rate=35.0))],
        [],
        representative_counts=False,
    )
    assert "pb-assumed-sea-level" not in _codes(somewhere)


def test_a_request_the_missing_input_caused_is_dropped_only_then() -> None:
    # FiO2 not sent: the representative asks for it (no shunt rule could apply), the scenarios
    # have it and do not; the venous PO2 every evaluation asks for stands.
    missing = evaluate(WIDER, {"arterial_po2": 55.0, "inspired_po2": 150.0})
    assert {r.fact for r in missing.verdict.data_requested} == {"fio2", "mixed_venous_po2"}
    scenarios = [Scenario("FiO2 0.9", _wide(fio2=0.9)), Scenario("FiO2 1.0", _wide(fio2=1.0))]
    verdict = combine(missing, scenarios, [], representative_counts=False)
    assert [r.fact for r in verdict.data_requested] == ["mixed_venous_po2"]
    # When the representative counts, what it asks for stands even if a scenario has it.
    counted = combine(_wide(), [Scenario("venous", _wide(mixed_venous_po2=35.0))], [])
    assert [r.fact for r in counted.data_requested] == ["mixed_venous_po2"]
