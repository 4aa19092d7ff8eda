"""Card wording and urgency rules, on hand-made assessment views."""

from __future__ import annotations

from collections.abc import Sequence
from datetime import UTC, datetime
from types import MappingProxyType
from typing import Any

import pytest

from service.cds.cards import (
    CardContext,
    fit,
    indicator,
    md,
    nothing_to_add,
    order_cards,
    patient_view_cards,
    summary,
)
from service.cds.orders import OxygenOrder
from service.cds.view import AssessmentView, FindingLine, MechanismLine, Number
from service.engine.vocabulary import Mechanism
from tests.cds.spec import check_card

MECHANISMS = tuple(m.value for m in Mechanism)
CONTEXT = CardContext(patient_id="cds-invented-1", encounter_id=None)


def make(
    pattern: str = "single",
    hypoxaemia: str = "present",
    grades: dict[str, str] | None = None,
    findings: Sequence[tuple[str, str]] = (),
    **numbers: float,
) -> AssessmentView:
    graded = dict.fromkeys(MECHANISMS, "unlikely") | (grades or {})
    units = {"fio2": "1", "shunt_fraction": "%", "spo2": "1", "ph": "[pH]"}
    return AssessmentView(
        decision_id="00000000-0000-4000-8000-000000000001",
        ruleset="oxyrule-default|1.2.0",
        pattern=pattern,
        hypoxaemia=hypoxaemia,
        status="success",
        mechanisms=tuple(
            MechanismLine(code, grade, f"reason for {code} | with a pipe", None)
            for code, grade in graded.items()
        ),
        findings=tuple(
            FindingLine.of(code, severity, f"{code} message") for code, severity in findings
        ),
        numbers=MappingProxyType(
            {name: Number(value, units.get(name, "mm[Hg]")) for name, value in numbers.items()}
        ),
        fio2_source="measured",
        device=None,
        sample_time=datetime(2026, 11, 21, 14, 5, tzinfo=UTC),
        oxygenation_measured="pao2" in numbers or "spo2" in numbers,
        data_requested=(),
    )


def test_a_summary_names_the_pattern_and_the_deciding_number() -> None:
    v = make(grades={"hypoventilation": "likely"}, pao2=62, paco2=65, fio2=0.21)
    assert summary(v, "mm[Hg]") == (
        "Hypoventilation is the likely cause of hypoxaemia: PaCO2 65 mmHg, "
        "with PaO2 62 mmHg on FiO2 0.21."
    )
    # 65 mmHg = 8.67 kPa; 62 mmHg = 8.27 kPa (1 kPa = 7.50062 mmHg).
    assert "PaCO2 8.7 kPa" in summary(v, "kPa") and "PaO2 8.3 kPa" in summary(v, "kPa")


def test_the_summary_stays_under_140_characters_and_one_sentence() -> None:
    long = "x" * 200
    assert len(fit(long + ".", "y " * 100 + ".")) < 140
    assert fit("short.", long) == "short."
    v = make(
        pattern="mixed",
        grades=dict.fromkeys(MECHANISMS, "likely"),
        pao2=40,
        fio2=0.6,
    )
    text = summary(v, "mm[Hg]")
    assert len(text) < 140 and text.endswith(".") and text.count(". ") == 0


def test_markdown_specials_are_escaped() -> None:
    assert md("a|b *c* _d_ <e> `f`\nnext") == r"a\|b \*c\* \_d\_ \<e\> \`f\` next"


@pytest.mark.parametrize(
    ("pattern", "findings", "grades", "expected"),
    [
        ("single", [("hypoxaemia-severe", "information")], {}, "critical"),
        (
            "not-classifiable",
            [("possible-venous-sample", "error"), ("hypoxaemia-severe", "information")],
            {},
            "warning",
        ),  # severe only on data that can be trusted
        ("indeterminate", [("occult-hypoxaemia", "warning")], {}, "warning"),
        ("single", [], {"hypoventilation": "likely"}, "warning"),
        ("single", [("pb-assumed-sea-level", "warning")], {"shunt": "likely"}, "info"),
        ("indeterminate", [("fio2-missing", "warning")], {}, "info"),
    ],
)
def test_indicator_rules(
    pattern: str, findings: list[tuple[str, str]], grades: dict[str, str], expected: str
) -> None:
    assert indicator(make(pattern, findings=findings, grades=grades, pao2=50)) == expected


def test_no_card_without_oxygenation_data_or_without_anything_to_add() -> None:
    assert nothing_to_add(make(paco2=40)) == "no recent PaO2 or SpO2"
    assert nothing_to_add(make("no-hypoxaemia", "absent", pao2=95, fio2=0.21)) == (
        "no hypoxaemia and nothing notable"
    )
    assert patient_view_cards(make("no-hypoxaemia", "absent", pao2=95), CONTEXT) == []


def test_a_defect_hidden_by_oxygen_is_worth_a_card_without_hypoxaemia() -> None:
    v = make(
        "no-hypoxaemia",
        "absent",
        findings=[("oxygen-masks-gas-exchange-defect", "warning")],
        pao2=95,
        fio2=0.5,
        aa_gradient=210,
        aa_limit=14,
    )
    (card,) = patient_view_cards(v, CONTEXT)
    check_card(card)
    assert card["summary"] == (
        "No hypoxaemia (PaO2 95 mmHg on FiO2 0.50), but A-a gradient 210 mmHg "
        "(age limit 14 mmHg) shows a gas-exchange defect hidden by oxygen."
    )
    assert card["indicator"] == "info"
    assert r"reason for shunt \| with a pipe" in card["detail"]


def order(
    fio2: float | None, *, ventilator: bool = False, device: str | None = None
) -> OxygenOrder:
    return OxygenOrder(
        "DeviceRequest/o2",
        "context.draftOrders.entry[0].resource",
        fio2,
        False,
        None,
        device,
        ventilator,
    )


HYPERCAPNIC: dict[str, Any] = {"grades": {"hypoventilation": "likely"}, "pao2": 58, "paco2": 62}


@pytest.mark.parametrize(
    ("ordered", "current", "cards"),
    [
        (0.40, 0.35, 1),
        (0.4000001, 0.40, 0),  # the same setting in whole percentage points
        (0.41, 0.40, 1),
        (0.28, 0.35, 0),  # less oxygen: nothing to warn of
        (None, 0.35, 1),  # unknown FiO2: it may be more
    ],
)
def test_more_oxygen_with_hypercapnia_gives_a_warning(
    ordered: float | None, current: float, cards: int
) -> None:
    v = make(**HYPERCAPNIC, fio2=current)
    found = order_cards(v, [order(ordered)], CONTEXT)
    assert len(found) == cards
    for card in found:
        check_card(card)
        assert card["indicator"] == "warning"
        assert card["suggestions"][0]["isRecommended"] is False


def test_a_ventilator_order_does_not_warn_of_masked_hypoventilation() -> None:
    v = make(**HYPERCAPNIC, fio2=0.35)
    assert order_cards(v, [order(0.5, ventilator=True)], CONTEXT) == []


def test_a_likely_shunt_gives_an_info_card_with_the_response_seen() -> None:
    v = make(
        grades={"shunt": "likely"},
        pao2=65,
        fio2=0.5,
        shunt_fraction=30,
        fio2_step=0.5,
        pao2_change=35,
    )
    (card,) = order_cards(v, [order(0.8)], CONTEXT)
    check_card(card)
    assert card["summary"] == "Shunt about 30 %: raising FiO2 to 0.80 will raise PaO2 little."
    assert "PaO2 changed by 35 mmHg for an FiO2 step of 0.50" in card["detail"]


def test_no_order_card_without_an_oxygen_order_or_without_data() -> None:
    assert order_cards(make(**HYPERCAPNIC, fio2=0.35), [], CONTEXT) == []
    assert order_cards(make(grades={"shunt": "likely"}, paco2=40), [order(0.8)], CONTEXT) == []


def test_an_order_value_that_could_not_be_read_is_named_on_the_card() -> None:
    unreadable = OxygenOrder(
        "DeviceRequest/o2",
        "context.draftOrders.entry[0].resource",
        None,
        False,
        None,
        "venturi-mask",
        False,
        ("a parameter (unit 'kg')",),
    )
    (card,) = order_cards(make(**HYPERCAPNIC, fio2=0.35), [unreadable], CONTEXT)
    assert "FiO2 not stated (a parameter (unit 'kg') could not be read)" in card["detail"]
    assert card["summary"].startswith("Oxygen ordered while PaCO2 is 62 mmHg")
