"""Numbers are compared and shown as stated (rounded to their catalogue decimals). ``evaluate``
rounds only the facts its rules compare; a rationale rounds the numbers it shows itself. The
sentences must read exactly as if every number had been rounded first."""

from __future__ import annotations

from pathlib import Path

import orjson
import pytest

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.assess.presentation import display_units
from service.engine import evaluate
from service.engine.facts import FactValue
from service.engine.rationale import compile_template
from service.runtime import Runtime

ROOT = Path(__file__).resolve().parents[2]
BUNDLES = sorted((ROOT / "fixtures").rglob("*.bundle.json"))
KPA_PER_MMHG = 133.322 / 1000  # 1 mm[Hg] = 133.322 Pa (UCUM, the unit's definition)


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def test_a_sentence_in_kpa_converts_the_stated_value_not_the_raw_one() -> None:
    template, problems = compile_template("PaCO2 {arterial_pco2}", DEFAULT_CATALOGUE, {})
    assert problems == []
    # 45.449 mmHg is stated as 45.4 (one decimal); 45.4 x 0.133322 = 6.0528 kPa -> "6.05",
    # where the raw value would read 6.0593 -> "6.06".
    assert f"{45.4 * KPA_PER_MMHG:.2f}" == "6.05"
    assert template.render({"arterial_pco2": 45.449}, display_units("kPa")) == "PaCO2 6.05 kPa"
    assert template.render({"arterial_pco2": 45.449}) == "PaCO2 45.4 mmHg"
    assert template.render({"arterial_pco2": 45.4}, display_units("kPa")) == "PaCO2 6.05 kPa"


def test_only_the_compared_facts_are_rounded_when_asked() -> None:
    facts = {"arterial_po2": 61.449, "arterial_pco2": 45.449, "age": 40, "spo2": 90.04}
    stated = DEFAULT_CATALOGUE.stated(facts, frozenset({"arterial_pco2", "age"}))
    assert stated == {"arterial_po2": 61.449, "arterial_pco2": 45.4, "age": 40, "spo2": 90.04}
    assert DEFAULT_CATALOGUE.stated(facts) == DEFAULT_CATALOGUE.as_stated(facts)


@pytest.mark.parametrize("path", BUNDLES, ids=lambda p: p.name)
def test_every_rationale_reads_as_if_every_number_had_been_rounded_first(
    runtime: Runtime, path: Path
) -> None:
    ruleset = runtime.ruleset
    assessment = runtime.assess_intake(runtime.read(orjson.loads(path.read_bytes())))
    facts = {k: v for k, v in assessment.index.facts.items() if k in ruleset.catalogue}
    rounded: dict[str, FactValue] = ruleset.catalogue.as_stated(facts)  # type: ignore[assignment]
    kpa = display_units("kPa")
    first = evaluate(ruleset, rounded)
    for result in evaluate(ruleset, facts).results:
        template = result.rule.rationale
        assert result.rationale == template.render(rounded), result.ref
        assert result.rationale_in(kpa) == template.render(rounded, kpa), result.ref
        assert result.trace == first.result(result.rule.id).trace
