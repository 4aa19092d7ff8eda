"""A rationale shows a fact's number as ``format_quantity`` does, in every unit the catalogue
has and at every sign: the fixed text of a fact slot (its number format and unit text) is
worked out at load, and must read exactly as the general path (``format_quantity``) reads.

Expected texts: fixed decimals at the fact's stated precision and the unit written the way
clinicians write it (mmHg, %, °C; none for a ratio or a pH) - common practice; a difference
that rounds to zero reads 0.0, never -0.0 (common practice).
"""

import pytest

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine.facts import FactKind
from service.engine.rationale import DisplayUnit, compile_template, format_quantity

# UCUM: 1 mm[Hg] = 0.1333220 kPa.
KPA = {"mm[Hg]": DisplayUnit("kPa", 0.1333220, extra_decimals=1)}


@pytest.mark.parametrize(
    ("fact", "value", "text"),
    [
        ("arterial_pco2", 52.349, "52.3 mmHg"),
        ("arterial_pco2", 0.0, "0.0 mmHg"),
        ("pao2_fall", -0.04, "0.0 mmHg"),
        ("pao2_fall", -3.26, "-3.3 mmHg"),
        ("spo2", 91.64, "91.6%"),
        ("fio2", 0.4, "0.40"),
        ("arterial_ph", 7.3149, "7.31"),
    ],
)
def test_a_fact_slot_shows_the_number_at_its_precision_with_a_readable_unit(
    fact: str, value: float, text: str
) -> None:
    template, problems = compile_template(f"<{{{fact}}}>", DEFAULT_CATALOGUE, {})
    assert problems == []
    assert template.render({fact: value}) == f"<{text}>"


@pytest.mark.parametrize("value", [0.0, -0.0, -0.04, 0.04, -12.35, 12.35, 760.0])
def test_every_quantity_slot_reads_as_format_quantity(value: float) -> None:
    for spec in DEFAULT_CATALOGUE.values():
        if spec.kind is not FactKind.QUANTITY:
            continue
        template, _ = compile_template(f"{{{spec.name}}}", DEFAULT_CATALOGUE, {})
        stated = round(value, spec.decimals)
        for units in ({}, KPA):
            expected = format_quantity(stated, spec.decimals, spec.unit or "1", units)
            assert template.render({spec.name: value}, units) == expected, (spec.name, units)


def test_a_pressure_in_kpa_is_converted_and_others_are_not() -> None:
    # 65 mmHg x 0.133322 = 8.666 kPa, two decimals in kPa (one more than in mmHg).
    template, _ = compile_template("{arterial_pco2} {spo2}", DEFAULT_CATALOGUE, {})
    assert template.render({"arterial_pco2": 65.0, "spo2": 91.0}, KPA) == "8.67 kPa 91.0%"
