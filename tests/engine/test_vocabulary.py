"""The closed vocabularies keep their wire spellings (downstream code switches on them)."""

from enum import StrEnum

import pytest

from service.engine.vocabulary import (
    FindingCode,
    Grade,
    HypoxaemiaStatus,
    Mechanism,
    Pattern,
    RuleStatus,
    Severity,
)

EXPECTED: list[tuple[type[StrEnum], set[str]]] = [
    (
        Mechanism,
        {"low-inspired-oxygen", "hypoventilation", "diffusion-limitation", "vq-mismatch", "shunt"},
    ),
    (Grade, {"likely", "possible", "unlikely", "not-assessable"}),
    (Severity, {"error", "warning", "information"}),
    (Pattern, {"no-hypoxaemia", "single", "mixed", "indeterminate", "not-classifiable"}),
    (HypoxaemiaStatus, {"present", "absent", "unknown"}),
    (RuleStatus, {"draft", "testing", "active", "retired"}),
]

MINIMUM_FINDINGS = {
    "pao2-exceeds-alveolar", "possible-venous-sample", "specimen-not-arterial",
    "specimen-unknown", "spo2-sao2-discordant", "occult-hypoxaemia", "dyshaemoglobin",
    "acid-base-inconsistent", "fio2-missing", "fio2-estimated-from-flow", "fio2-time-mismatch",
    "pb-estimated-from-altitude", "pb-assumed-sea-level", "no-arterial-gas", "paco2-missing",
    "value-out-of-range", "unit-converted", "observation-ignored", "hypoxaemia-mild",
    "hypoxaemia-moderate", "hypoxaemia-severe", "oxygen-masks-gas-exchange-defect",
    "normal-for-altitude", "low-mixed-venous-oxygen", "acute-respiratory-acidosis",
    "chronic-respiratory-acidosis",
}  # fmt: skip


@pytest.mark.parametrize(("vocabulary", "values"), EXPECTED, ids=lambda item: str(item))
def test_vocabulary_has_exactly_the_agreed_values(
    vocabulary: type[StrEnum], values: set[str]
) -> None:
    assert {member.value for member in vocabulary} == values


@pytest.mark.parametrize("vocabulary", [item for item, _ in EXPECTED] + [FindingCode])
def test_vocabulary_members_compare_equal_to_their_wire_spelling(
    vocabulary: type[StrEnum],
) -> None:
    assert issubclass(vocabulary, StrEnum)
    for member in vocabulary:
        assert member == member.value
        assert vocabulary(member.value) is member


def test_finding_codes_include_the_minimum_set() -> None:
    assert {code.value for code in FindingCode} >= MINIMUM_FINDINGS


def test_mechanisms_are_listed_in_reporting_order() -> None:
    assert list(Mechanism) == [
        Mechanism.LOW_INSPIRED_OXYGEN,
        Mechanism.HYPOVENTILATION,
        Mechanism.DIFFUSION_LIMITATION,
        Mechanism.VQ_MISMATCH,
        Mechanism.SHUNT,
    ]
