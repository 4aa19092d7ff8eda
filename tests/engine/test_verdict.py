"""The verdict: priority resolution, patterns, demotion, hypoxaemia and data requested."""

from typing import Any

from service.engine import (
    DataRequest,
    Grade,
    HypoxaemiaStatus,
    Mechanism,
    Pattern,
    Severity,
    Verdict,
    evaluate,
)
from service.engine.facts import FactValue

from .builders import MMHG, build, finding, leaf, mechanism, rule

OXYGENATED: dict[str, FactValue] = {"arterial_po2": 58.0}


def _when_present(fact: str) -> dict[str, Any]:
    return {"fact": fact, "present": True}


def _grading(
    rule_id: str, code: str, grade: str, priority: int, fact: str, **extra: Any
) -> dict[str, Any]:
    """A rule that grades `code` when `fact` is present."""
    if grade == "possible" and "discriminator" not in extra:
        extra["discriminator"] = {"text": "Settle it.", "requests": ["mixed_venous_po2"]}
    return rule(
        rule_id,
        outcome=mechanism(code, grade, priority),
        when=_when_present(fact),
        rationale=f"{rule_id} fired.",
        **extra,
    )


def _verdict(rules: list[dict[str, Any]], facts: dict[str, FactValue]) -> Verdict:
    return evaluate(build(rules=rules), facts).verdict


def test_a_mechanism_no_rule_fired_for_is_not_assessable() -> None:
    verdict = _verdict([], OXYGENATED)
    assert [item.grade for item in verdict.mechanisms] == [Grade.NOT_ASSESSABLE] * 5
    assert [item.mechanism for item in verdict.mechanisms] == list(Mechanism)
    assert verdict.pattern is Pattern.INDETERMINATE


def test_the_fired_rule_with_the_lowest_priority_decides() -> None:
    rules = [
        _grading("shunt-strong", "shunt", "likely", 10, "peep"),
        _grading("shunt-weak", "shunt", "unlikely", 20, "respiratory_rate"),
    ]
    both = _verdict(rules, {**OXYGENATED, "peep": 8.0, "respiratory_rate": 20.0})
    item = both.assessment(Mechanism.SHUNT)
    assert (item.grade, item.rules, item.superseded) == (
        Grade.LIKELY,
        ("shunt-strong@1.0.0",),
        ("shunt-weak@1.0.0",),
    )
    assert item.rationales == ("shunt-strong fired.",)
    only_weak = _verdict(rules, {**OXYGENATED, "respiratory_rate": 20.0})
    assert only_weak.grade(Mechanism.SHUNT) is Grade.UNLIKELY


def test_tied_rules_with_the_same_grade_are_listed_together() -> None:
    rules = [
        _grading("shunt-a", "shunt", "likely", 10, "peep"),
        _grading("shunt-b", "shunt", "likely", 10, "respiratory_rate"),
    ]
    item = _verdict(rules, {**OXYGENATED, "peep": 8.0, "respiratory_rate": 20.0}).assessment(
        Mechanism.SHUNT
    )
    assert item.rules == ("shunt-a@1.0.0", "shunt-b@1.0.0")
    assert item.rationales == ("shunt-a fired.", "shunt-b fired.")


def test_one_likely_mechanism_is_a_single_pattern() -> None:
    verdict = _verdict([_grading("s", "shunt", "likely", 1, "peep")], {**OXYGENATED, "peep": 5.0})
    assert verdict.pattern is Pattern.SINGLE
    assert verdict.pattern_reason == "one mechanism is likely: shunt"


def test_two_likely_mechanisms_are_a_mixed_pattern() -> None:
    rules = [
        _grading("s", "shunt", "likely", 1, "peep"),
        _grading("v", "vq-mismatch", "likely", 1, "peep"),
        _grading("h", "hypoventilation", "unlikely", 1, "peep"),
    ]
    verdict = _verdict(rules, {**OXYGENATED, "peep": 5.0})
    assert verdict.pattern is Pattern.MIXED
    assert "vq-mismatch, shunt" in verdict.pattern_reason


def test_no_likely_mechanism_is_an_indeterminate_pattern() -> None:
    rules = [_grading("s", "shunt", "possible", 1, "peep")]
    assert _verdict(rules, {**OXYGENATED, "peep": 5.0}).pattern is Pattern.INDETERMINATE


def test_a_likely_mechanism_is_named_even_when_oxygen_keeps_hypoxaemia_away() -> None:
    # A large shunt on pure oxygen can leave the PaO2 normal: the defect is still there and
    # "no hypoxaemia" would reassure wrongly (the Berggren shunt equation at Hb 14 g/dL and an
    # a-v difference of 5 mL/dL: a 30 % shunt gives a PaO2 near 100 mmHg on FiO2 1.0).
    rules = [
        rule("fine", outcome={"hypoxaemia": "absent"}, when=leaf("arterial_po2", "ge", 80, MMHG)),
        _grading("s", "shunt", "likely", 1, "peep"),
    ]
    verdict = _verdict(rules, {"arterial_po2": 95.0, "peep": 5.0})
    assert verdict.hypoxaemia is HypoxaemiaStatus.ABSENT
    assert verdict.hypoxaemia_rules == ("fine@1.0.0",)
    assert verdict.pattern is Pattern.SINGLE
    assert verdict.grade(Mechanism.SHUNT) is Grade.LIKELY


def test_present_hypoxaemia_wins_over_absent_when_both_fire() -> None:
    rules = [
        rule("low", outcome={"hypoxaemia": "present"}, when=_when_present("spo2")),
        rule("fine", outcome={"hypoxaemia": "absent"}, when=_when_present("arterial_po2")),
    ]
    verdict = _verdict(rules, {"arterial_po2": 85.0, "spo2": 90.0})
    assert verdict.hypoxaemia is HypoxaemiaStatus.PRESENT
    assert verdict.hypoxaemia_rules == ("low@1.0.0",)


def test_hypoxaemia_is_unknown_when_no_hypoxaemia_rule_fires() -> None:
    rules = [
        rule("low", outcome={"hypoxaemia": "present"}, when=leaf("arterial_po2", "lt", 80, MMHG))
    ]
    verdict = _verdict(rules, {"spo2": 97.0})
    assert verdict.hypoxaemia is HypoxaemiaStatus.UNKNOWN
    assert verdict.hypoxaemia_rules == ()


def test_an_error_finding_makes_the_gas_not_classifiable_and_demotes_likely_grades() -> None:
    rules = [
        rule(
            "venous",
            outcome=finding("specimen-not-arterial", "error"),
            when={"fact": "specimen_not_arterial", "is": True},
        ),
        _grading("s", "shunt", "likely", 1, "peep"),
        _grading("h", "hypoventilation", "unlikely", 1, "peep"),
    ]
    verdict = _verdict(rules, {**OXYGENATED, "peep": 5.0, "specimen_not_arterial": True})
    assert verdict.pattern is Pattern.NOT_CLASSIFIABLE
    assert verdict.pattern_reason == "error finding fired: specimen-not-arterial"
    shunt = verdict.assessment(Mechanism.SHUNT)
    assert (shunt.grade, shunt.demoted) == (Grade.POSSIBLE, True)
    assert shunt.rationales[-1] == (
        "Demoted from likely to possible: the gas is not classifiable "
        "(error finding fired: specimen-not-arterial)."
    )
    assert verdict.grade(Mechanism.HYPOVENTILATION) is Grade.UNLIKELY
    assert not verdict.assessment(Mechanism.HYPOVENTILATION).demoted
    assert not any(item.grade is Grade.LIKELY for item in verdict.mechanisms)


def test_a_warning_finding_does_not_make_the_gas_not_classifiable() -> None:
    rules = [
        rule(
            "warn", outcome=finding("fio2-missing", "warning"), when=leaf("fio2", "present", False)
        ),
        _grading("s", "shunt", "likely", 1, "peep"),
    ]
    verdict = _verdict(rules, {**OXYGENATED, "peep": 5.0})
    assert verdict.pattern is Pattern.SINGLE
    assert [(f.code, f.severity, f.rule) for f in verdict.findings] == [
        ("fio2-missing", Severity.WARNING, "warn@1.0.0")
    ]


def test_without_arterial_po2_or_spo2_the_gas_is_not_classifiable() -> None:
    rules = [_grading("s", "shunt", "likely", 1, "peep")]
    verdict = _verdict(rules, {"peep": 5.0})
    assert verdict.pattern is Pattern.NOT_CLASSIFIABLE
    assert verdict.pattern_reason == "neither arterial_po2 nor spo2 is known"
    assert verdict.grade(Mechanism.SHUNT) is Grade.POSSIBLE
    spo2_only = _verdict(rules, {"peep": 5.0, "spo2": 91.0})
    assert spo2_only.pattern is Pattern.SINGLE


def test_findings_are_listed_errors_first() -> None:
    rules = [
        rule(
            "i",
            outcome=finding("normal-for-altitude", "information"),
            when=_when_present("altitude"),
        ),
        rule("w", outcome=finding("fio2-missing", "warning"), when=_when_present("altitude")),
        rule("e", outcome=finding("no-arterial-gas", "error"), when=_when_present("altitude")),
    ]
    verdict = _verdict(rules, {**OXYGENATED, "altitude": 2500.0})
    assert [f.severity for f in verdict.findings] == [
        Severity.ERROR,
        Severity.WARNING,
        Severity.INFORMATION,
    ]
    assert verdict.findings[0].rationale == "PaCO2 is not known."


def test_two_findings_are_listed_errors_first_too() -> None:
    rules = [
        # Rules run in the order of their ids: the warning's comes first.
        rule("a-w", outcome=finding("fio2-missing", "warning"), when=_when_present("altitude")),
        rule("z-e", outcome=finding("no-arterial-gas", "error"), when=_when_present("altitude")),
    ]
    verdict = _verdict(rules, {**OXYGENATED, "altitude": 2500.0})
    assert [f.severity for f in verdict.findings] == [Severity.ERROR, Severity.WARNING]


def test_a_testing_rule_is_reported_but_never_changes_the_verdict() -> None:
    rules = [
        _grading("candidate", "shunt", "likely", 1, "peep", status="testing"),
        rule(
            "e",
            status="testing",
            outcome=finding("no-arterial-gas", "error"),
            when=_when_present("peep"),
        ),
    ]
    evaluation = evaluate(build(rules=rules), {**OXYGENATED, "peep": 5.0})
    assert evaluation.verdict.grade(Mechanism.SHUNT) is Grade.NOT_ASSESSABLE
    assert evaluation.verdict.findings == ()
    assert evaluation.verdict.pattern is Pattern.INDETERMINATE
    assert all(result.shadow for result in evaluation.results)
    assert {result.state.value for result in evaluation.results} == {"true"}


def test_data_requested_lists_every_discriminator_request_of_a_possible_grade() -> None:
    # fio2_step is known, but the discriminator asks for a new gas: it stays requested.
    discriminator = {
        "text": "A second gas on more oxygen.",
        "requests": ["fio2_step", "mixed_venous_po2"],
    }
    rules = [_grading("s", "shunt", "possible", 1, "peep", discriminator=discriminator)]
    verdict = _verdict(rules, {**OXYGENATED, "peep": 5.0, "fio2_step": 0.2})
    assert verdict.data_requested == (
        DataRequest("mixed_venous_po2", ("s@1.0.0",)),
        DataRequest("fio2_step", ("s@1.0.0",)),
    )
    assert verdict.assessment(Mechanism.SHUNT).discriminators[0].text == discriminator["text"]


def test_discriminators_of_losing_or_other_grades_request_nothing() -> None:
    rules = [
        _grading("s-likely", "shunt", "likely", 1, "peep"),
        _grading("s-possible", "shunt", "possible", 2, "peep"),
    ]
    assert _verdict(rules, {**OXYGENATED, "peep": 5.0}).data_requested == ()


def test_data_requested_lists_missing_facts_that_could_decide_a_not_assessable_mechanism() -> None:
    when = {
        "all": [
            leaf("dlco_percent_predicted", "lt", 60, "%"),
            leaf("exertional_desaturation", "ge", 4, "%"),
        ]
    }
    rules = [rule("d", outcome=mechanism("diffusion-limitation", "likely", 1), when=when)]
    verdict = _verdict(rules, {**OXYGENATED, "exertional_desaturation": 6.0})
    assert verdict.data_requested == (DataRequest("dlco_percent_predicted", ("d@1.0.0",)),)


def test_data_requested_turns_a_missing_derived_fact_into_its_missing_inputs() -> None:
    rules = [
        rule(
            "v",
            outcome=mechanism("vq-mismatch", "likely", 1),
            when=leaf("aa_gradient_excess", "gt", 0, MMHG),
        )
    ]
    facts: dict[str, FactValue] = {
        "arterial_po2": 60.0,
        "arterial_pco2": 40.0,
        "barometric_pressure": 760.0,
        "water_vapour_pressure": 47.1,
        "aa_gradient_upper_limit": 20.0,
    }
    verdict = _verdict(rules, facts)
    assert verdict.data_requested == (DataRequest("fio2", ("v@1.0.0",), ("aa_gradient_excess",)),)


def test_data_requested_skips_mechanisms_that_were_assessed() -> None:
    rules = [
        _grading("s", "shunt", "unlikely", 1, "peep"),
        rule(
            "s2",
            outcome=mechanism("shunt", "likely", 0),
            when=leaf("shunt_fraction", "gt", 20, "%"),
        ),
    ]
    verdict = _verdict(rules, {**OXYGENATED, "peep": 5.0})
    assert verdict.grade(Mechanism.SHUNT) is Grade.UNLIKELY
    assert verdict.data_requested == ()
