"""The one module that reads an Assessment: it must copy what the cards need, faithfully."""

from __future__ import annotations

import json
from dataclasses import replace
from datetime import UTC, datetime
from enum import Enum, StrEnum
from pathlib import Path

import pytest

from service.assess.result import Assessment
from service.cds.view import FINDING_LABELS, FINDING_TAGS, view
from service.engine.vocabulary import FindingCode
from service.runtime import Runtime
from tests.cds.conftest import ROOT

DEMO = ROOT / "fixtures" / "demo"


def assessed(runtime: Runtime, path: Path) -> Assessment:
    intake = runtime.read(json.loads(path.read_text()))
    return runtime.assess_intake(intake, now=datetime(2026, 11, 25, tzinfo=UTC))


@pytest.mark.parametrize("path", sorted(DEMO.glob("*.bundle.json")), ids=lambda p: p.name)
def test_the_view_copies_pattern_grades_findings_and_requests(runtime: Runtime, path: Path) -> None:
    a = assessed(runtime, path)
    v = view(a)
    assert (v.pattern, v.hypoxaemia, v.status) == (a.pattern, a.hypoxaemia, a.status)
    assert [(m.code, m.grade, m.rationale, m.discriminator) for m in v.mechanisms] == [
        (m.code, m.grade, m.rationale, m.discriminator) for m in a.mechanisms
    ]
    assert [(f.code, f.severity) for f in v.findings] == [(f.code, f.severity) for f in a.findings]
    assert v.data_requested == tuple(a.data_requested)
    assert v.decision_id == a.decision_id and v.ruleset == a.ruleset_identity
    assert v.oxygenation_measured


def test_the_numbers_are_the_index_gas_values_in_canonical_units(runtime: Runtime) -> None:
    v = view(assessed(runtime, DEMO / "post-operative-drowsiness.bundle.json"))
    # Sent in the fixture: PaO2 62 and PaCO2 65 mm[Hg], pH 7.25, FiO2 21 %.
    assert (v.numbers["pao2"].value, v.numbers["pao2"].unit) == (62.0, "mm[Hg]")
    assert v.numbers["paco2"].value == 65.0
    assert v.numbers["ph"].value == pytest.approx(7.25)
    assert v.numbers["fio2"].value == pytest.approx(0.21)
    assert v.numbers["fio2"].unit == "1"
    # [calc] as the fixture's expectation: alveolar PO2 72.4, A-a gradient 10.4 mm[Hg].
    assert v.numbers["alveolar_po2"].value == pytest.approx(72.4, abs=0.2)
    assert v.numbers["aa_gradient"].value == pytest.approx(10.4, abs=0.2)
    assert v.sample_time == datetime(2026, 11, 21, 14, 5, tzinfo=UTC)


def test_the_serial_numbers_compare_the_index_gas_with_the_other_fio2(runtime: Runtime) -> None:
    v = view(assessed(runtime, DEMO / "ventilated-two-fio2.bundle.json"))
    # PaO2 65 on FiO2 0.5, then 100 on 1.0 (the index gas).
    assert v.numbers["fio2_step"].value == pytest.approx(0.5)
    assert v.numbers["pao2_change"].value == pytest.approx(35.0)
    assert v.numbers["shunt_fraction"].unit == "%"


class Grade(StrEnum):
    LIKELY = "likely"


class Pattern(Enum):
    SINGLE = "single"


def test_codes_held_as_enums_are_read_as_their_published_values(runtime: Runtime) -> None:
    # The assessment's free strings are to become enums: the view must read both alike.
    a = assessed(runtime, DEMO / "post-operative-drowsiness.bundle.json")
    first = replace(a.mechanisms[0], grade=Grade.LIKELY)  # type: ignore[arg-type]
    mechanisms = [first, *a.mechanisms[1:]]
    changed = replace(a, pattern=Pattern.SINGLE, mechanisms=mechanisms)  # type: ignore[arg-type]
    v = view(changed)
    assert v.pattern == "single"
    assert v.mechanisms[0].grade == "likely"


def test_every_finding_code_of_the_rule_set_has_words_for_a_card() -> None:
    # A new finding code needs its words (and, if it matters for the indicator or for a card
    # without hypoxaemia, its tags) in service/cds/view.py: this test says so.
    missing = [code.value for code in FindingCode if code.value not in FINDING_LABELS]
    assert missing == []
    assert set(FINDING_TAGS) <= set(FINDING_LABELS)
