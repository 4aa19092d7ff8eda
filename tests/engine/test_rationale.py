"""Rationale templates: values with readable units, sensible rounding, visible gaps."""

import pytest

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine import evaluate
from service.engine.facts import FactValue
from service.engine.parameters import Parameter
from service.engine.rationale import DisplayUnit, compile_template, format_quantity

from .builders import build, manifest, rule


@pytest.mark.parametrize(
    ("value", "decimals", "unit", "text"),
    [
        (52.349, 1, "mm[Hg]", "52.3 mmHg"),
        (7.3149, 2, "[pH]", "7.31"),
        (0.4, 2, "1", "0.40"),
        (91.6, 0, "%", "92%"),
        (37.25, 1, "Cel", "37.2 °C"),
        (64, 0, "a", "64 years"),
        (8, 0, "cm[H2O]", "8 cmH2O"),
        (18, 0, "/min", "18/min"),
        (24.04, 1, "mmol/L", "24.0 mmol/L"),
        (-0.04, 1, "mm[Hg]", "0.0 mmHg"),
        (-3.26, 1, "mm[Hg]", "-3.3 mmHg"),
    ],
)
def test_format_quantity_rounds_to_the_fact_precision_and_shows_a_readable_unit(
    value: float, decimals: int, unit: str, text: str
) -> None:
    assert format_quantity(value, decimals, unit) == text


def test_template_fills_facts_of_every_kind() -> None:
    template, problems = compile_template(
        "PaCO2 {arterial_pco2}, pH {arterial_ph}, on {oxygen_device}, "
        "estimated {fio2_estimated_from_flow}",
        DEFAULT_CATALOGUE,
        {},
    )
    assert problems == []
    facts: dict[str, FactValue] = {
        "arterial_pco2": 58.26,
        "arterial_ph": 7.3,
        "oxygen_device": "venturi-mask",
        "fio2_estimated_from_flow": False,
    }
    assert template.render(facts) == "PaCO2 58.3 mmHg, pH 7.30, on venturi-mask, estimated no"


def test_template_shows_a_missing_fact_by_name() -> None:
    template, _ = compile_template("SpO2 {spo2}.", DEFAULT_CATALOGUE, {})
    assert template.render({}) == "SpO2 not known."


def test_template_writes_parameters_as_written_with_their_unit() -> None:
    parameter = Parameter("limit", 0.75, "1", "d", 0.5, 0.9, "s", 0.75)
    template, _ = compile_template(
        "a/A below {limit}; {{braces}}", DEFAULT_CATALOGUE, {"limit": parameter}
    )
    assert template.render({}) == "a/A below 0.75; {braces}"


def test_rendered_rationale_uses_the_overridden_parameter_value() -> None:
    data = rule("r", rationale="PaCO2 {arterial_pco2} above {hypercapnia_threshold}.")
    ruleset = build(rules=[data], overrides={"hypercapnia_threshold": 50})
    result = evaluate(ruleset, {"arterial_pco2": 51.04}).result("r")
    assert result.rationale == "PaCO2 51.0 mmHg above 50 mmHg."


# UCUM: m[Hg] = 133.3220 kPa, so 1 mm[Hg] = 0.1333220 kPa (the factor FHIR payloads use).
KPA = {"mm[Hg]": DisplayUnit("kPa", 0.1333220, extra_decimals=1)}


def test_the_unit_of_a_sentence_is_a_rendering_choice() -> None:
    ruleset = build(
        rules=[
            rule(
                "hypercapnia-kpa",
                when={"ref": "hypercapnia"},
                rationale="PaCO2 {arterial_pco2} is above {hypercapnia_threshold} "
                "(pH {arterial_ph}).",
            )
        ],
    )
    facts: dict[str, FactValue] = {"arterial_pco2": 65.0, "arterial_ph": 7.25}
    result = evaluate(ruleset, facts).results[0]
    assert result.rationale == "PaCO2 65.0 mmHg is above 45 mmHg (pH 7.25)."
    # 65 × 0.133322 = 8.666 kPa; the threshold 45 mmHg = 5.9995 kPa, shown as written: 6.
    assert result.rationale_in(KPA) == "PaCO2 8.67 kPa is above 6 kPa (pH 7.25)."
    assert result.rationale_in({}) == result.rationale


def test_a_converted_parameter_keeps_two_decimals_and_never_reads_minus_zero() -> None:
    # UCUM factor 0.1333220: 10 mmHg = 1.33322 kPa, shown to two decimals (1.33, not 1.3);
    # a value that rounds to zero reads 0, not -0.
    for value, shown in ((10.0, "1.33 kPa"), (-0.001, "0 kPa"), (45.0, "6 kPa")):
        data = manifest()
        data["parameters"]["margin"] = {
            "value": value,
            "unit": "mm[Hg]",
            "description": "Invented for tests.",
            "minimum": -5,
            "maximum": 50,
            "source": "Invented for tests.",
        }
        ruleset = build(
            data, [rule("r", when={"ref": "hypercapnia"}, rationale="Margin {margin}.")]
        )
        result = evaluate(ruleset, {"arterial_pco2": 65.0}).results[0]
        assert result.rationale_in(KPA) == f"Margin {shown}."


def test_the_tree_shows_each_leaf_with_its_text_and_each_block_by_name_with_its_parts() -> None:
    ruleset = build(
        rules=[
            rule(
                "tree",
                when={
                    "all": [
                        {"ref": "hypercapnia"},
                        {"fact": "arterial_ph", "lt": 7.35, "unit": "[pH]"},
                    ]
                },
                rationale="PaCO2 {arterial_pco2}.",
            )
        ]
    )
    tree = evaluate(ruleset, {"arterial_pco2": 65.0, "arterial_ph": 7.25}).results[0].tree
    assert tree.kind == "all"
    block, leaf = tree.children
    assert (block.kind, block.name) == ("ref", "hypercapnia")
    (inner,) = block.children
    assert inner.kind == "leaf" and inner.leaf is not None
    assert inner.text.startswith("arterial_pco2 65")
    assert leaf.kind == "leaf" and leaf.leaf is not None and leaf.text.startswith("arterial_ph")
    # A block met twice in one evaluation is the same node (worked out once).
    twice = build(
        rules=[
            rule("a", when={"ref": "hypercapnia"}, rationale="a"),
            rule("b", when={"ref": "hypercapnia"}, rationale="b"),
        ]
    )
    first, second = evaluate(twice, {"arterial_pco2": 65.0}).results
    assert first.tree is not None and first.tree.kind == "ref"
    assert second.tree.children == first.tree.children
