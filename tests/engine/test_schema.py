"""Shape checks of rule files and manifests (pydantic models, extra fields forbidden)."""

from typing import Any

import pytest
from pydantic import ValidationError

from service.engine.logic import Operator
from service.engine.schema import LeafNode, ManifestModel, OutcomeModel, RuleModel

from .builders import manifest, rule


def _error_types(model: type[Any], data: Any) -> list[tuple[str, tuple[int | str, ...]]]:
    with pytest.raises(ValidationError) as caught:
        model.model_validate(data)
    return [(error["type"], tuple(error["loc"])) for error in caught.value.errors()]


def test_rule_model_accepts_a_valid_rule() -> None:
    model = RuleModel.model_validate(rule())
    assert model.id == "sample-rule"


@pytest.mark.parametrize(
    ("operator", "argument"),
    [
        ("lt", 1),
        ("le", 1.5),
        ("gt", {"param": "p"}),
        ("ge", 0),
        ("eq", 2),
        ("between", [1, {"param": "p"}]),
        ("present", False),
        ("is", True),
        ("in", ["a"]),
    ],
)
def test_leaf_reports_the_one_operator_it_uses(operator: str, argument: Any) -> None:
    leaf = LeafNode.model_validate({"fact": "x", operator: argument})
    assert leaf.operator is Operator(operator)


@pytest.mark.parametrize(
    ("leaf", "error"),
    [
        ({"fact": "x"}, "leaf_operator"),
        ({"fact": "x", "lt": 1, "gt": 0}, "leaf_operator"),
        ({"fact": "x", "gt": True}, "threshold"),
        ({"fact": "x", "gt": "45"}, "threshold"),
        ({"fact": "x", "gt": {"parameter": "p"}}, "extra_forbidden"),
        ({"fact": "x", "between": [1]}, "missing"),
        ({"fact": "x", "between": [1, 2, 3]}, "too_long"),
        ({"fact": "x", "in": []}, "too_short"),
        ({"fact": "x", "is": "yes"}, "bool_type"),
        ({"fact": "x", "lt": 1, "unti": "1"}, "extra_forbidden"),
    ],
)
def test_leaf_rejects_a_malformed_leaf(leaf: dict[str, Any], error: str) -> None:
    assert error in [kind for kind, _ in _error_types(LeafNode, leaf)]


@pytest.mark.parametrize(
    "when",
    [
        {"every": [{"fact": "x", "lt": 1}]},
        {"all": []},
        {"expression": "x < 1"},
        "x < 1",
    ],
)
def test_rule_rejects_conditions_that_are_not_all_any_not_ref_or_leaf(when: Any) -> None:
    assert _error_types(RuleModel, rule(when=when))


@pytest.mark.parametrize(
    "outcome",
    [
        {},
        {"finding": {"code": "fio2-missing", "severity": "warning"}, "hypoxaemia": "present"},
        {"mechanism": {"code": "shunt", "grade": "likely"}},
        {"finding": {"code": "fio2-missing", "severity": "warning"}, "priority": 3},
        {"mechanism": {"code": "shunt", "grade": "unknown"}, "priority": 3},
        {"mechanism": {"code": "dead-space", "grade": "likely"}, "priority": 3},
        {"finding": {"code": "Made Up", "severity": "warning"}},  # not a kebab-case code
        {"hypoxaemia": "unknown"},
        {"gas_exchange": "impaired"},
        {"gas_exchange": "defect", "hypoxaemia": "present"},
        {"mechanism": {"code": "shunt", "grade": "likely"}, "priority": "high"},
    ],
)
def test_outcome_rejects_anything_but_exactly_one_valid_kind(outcome: dict[str, Any]) -> None:
    assert _error_types(OutcomeModel, outcome)


@pytest.mark.parametrize(
    "outcome",
    [
        {"mechanism": {"code": "shunt", "grade": "not-assessable"}, "priority": 3},
        {"gas_exchange": "defect"},
        {"gas_exchange": "normal"},
        {"hypoxaemia": "absent"},
        {"finding": {"code": "fio2-missing", "severity": "warning"}},
    ],
)
def test_outcome_accepts_each_kind(outcome: dict[str, Any]) -> None:
    OutcomeModel.model_validate(outcome)


@pytest.mark.parametrize(
    ("change", "error"),
    [
        ({"version": 1.0}, "string_type"),
        ({"version": "1.0"}, "semver"),
        ({"id": "Sample_Rule"}, "kebab_id"),
        ({"status": "live"}, "enum"),
        ({"references": []}, "too_short"),
        ({"rationale": ""}, "string_too_short"),
        ({"colour": "red"}, "extra_forbidden"),
    ],
)
def test_rule_rejects_malformed_envelope_fields(change: dict[str, Any], error: str) -> None:
    assert error in [kind for kind, _ in _error_types(RuleModel, rule(**change))]


def test_manifest_requires_snake_case_parameter_and_block_names() -> None:
    data = manifest(blocks={"Bad-Name": {"fact": "x", "present": True}})
    assert ("snake_name", ("blocks", "Bad-Name", "[key]")) in _error_types(ManifestModel, data)


def test_manifest_parameter_needs_every_field() -> None:
    data = manifest(parameters={"p": {"value": 1, "unit": "1"}})
    missing = {loc[-1] for kind, loc in _error_types(ManifestModel, data) if kind == "missing"}
    assert missing == {"description", "minimum", "maximum", "source"}
