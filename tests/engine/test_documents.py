"""Reading YAML strictly and translating validation errors into located problems."""

from typing import Any

import pytest

from service.engine.documents import field_path, parse_yaml, validate_document
from service.engine.schema import RuleModel

from .builders import rule


def test_parse_yaml_rejects_a_key_written_twice() -> None:
    data, problem = parse_yaml(b"when:\n  fact: spo2\n  lt: 90\n  lt: 92\n", "r.yaml")
    assert data is None
    assert problem is not None
    assert problem.file == "r.yaml"
    assert "found the key 'lt' twice" in problem.message
    assert "line 4" in problem.message


def test_parse_yaml_allows_overriding_a_merged_key() -> None:
    text = b"base: &b {fact: spo2, lt: 90}\nleaf:\n  <<: *b\n  lt: 92\n"
    data, problem = parse_yaml(text, "r.yaml")
    assert problem is None
    assert data["leaf"] == {"fact": "spo2", "lt": 92}


def test_parse_yaml_reports_syntax_errors_with_position_and_quoting_hint() -> None:
    data, problem = parse_yaml(b"when: {fact: spo2, unit: mm[Hg]}\n", "r.yaml")
    assert data is None
    assert problem is not None
    assert "line 1" in problem.message
    assert 'unit: "mm[Hg]"' in problem.hint


def test_parse_yaml_rejects_bytes_that_are_not_utf8() -> None:
    _, problem = parse_yaml(b"id: \xff\n", "r.yaml")
    assert problem is not None
    assert "UTF-8" in problem.message


def test_parse_yaml_refuses_python_object_tags() -> None:
    _, problem = parse_yaml(b"id: !!python/object/apply:os.getcwd []\n", "r.yaml")
    assert problem is not None


@pytest.mark.parametrize(
    ("loc", "path"),
    [
        (("when", "all-of", "all", 1, "leaf", "gt"), "when.all[1].gt"),
        (("when", "leaf", "between", 0, "parameter-ref", "param"), "when.between[0].param"),
        (("parameters", "Bad", "[key]"), "parameters.Bad"),
        ((), ""),
    ],
)
def test_field_path_drops_union_tags_and_renders_indices(
    loc: tuple[int | str, ...], path: str
) -> None:
    assert field_path(loc) == path


def test_validate_document_names_file_rule_field_and_fix() -> None:
    data: dict[str, Any] = rule("my-rule", when={"all": [{"fact": "spo2", "lt": 90, "gt": 80}]})
    model, found = validate_document(RuleModel, data, "my-rule.yaml", "my-rule")
    assert model is None
    [problem] = found
    assert (problem.file, problem.rule_id, problem.field) == (
        "my-rule.yaml",
        "my-rule",
        "when.all[0]",
    )
    assert "exactly one operator (found: lt, gt)" in problem.message
    assert "keep exactly one of" in problem.hint


def test_validate_document_rejects_a_file_that_is_not_a_mapping() -> None:
    model, found = validate_document(RuleModel, ["a", "list"], "x.yaml", None)
    assert model is None
    assert found[0].message == "the file is not a YAML mapping"
