"""Loading rule sets: every load error names file, rule, field and a fix."""

from pathlib import Path
from typing import Any

import pytest

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine import RuleSetError, RuleStatus, build_ruleset, content_hash, load_ruleset

from .builders import (
    MMHG,
    build,
    documents,
    finding,
    leaf,
    manifest,
    mechanism,
    only_problem,
    problems,
    rule,
    write_tree,
)

SAMPLE = Path(__file__).parent / "data" / "sample"


def _located(problem: Any, file: str, rule_id: str | None, field: str) -> None:
    """The problem names file, rule and field, in its fields and in its text, with a fix."""
    assert (problem.file, problem.rule_id, problem.field) == (file, rule_id, field), str(problem)
    assert problem.message
    assert problem.hint
    text = str(problem)
    assert text.startswith(file)
    if rule_id is not None:
        assert f" rule {rule_id} " in text
    if field:
        assert f" field {field}: " in text
    assert f"(fix: {problem.hint})" in text


def test_loader_loads_the_sample_rule_set() -> None:
    ruleset = load_ruleset(SAMPLE, catalogue=DEFAULT_CATALOGUE)
    assert ruleset.identity == "engine-test-sample|1.4.0"
    assert {rule.id for rule in ruleset.retired} == {"hypoventilation-old"}
    statuses = {rule.id: rule.status for rule in ruleset.rules}
    assert statuses["shunt-draft"] is RuleStatus.DRAFT
    assert statuses["diffusion-exertional"] is RuleStatus.TESTING
    assert "shunt-draft" not in {rule.id for rule in ruleset.evaluated}
    assert ruleset.rule("hypoventilation-alone").file == "mechanisms/hypoventilation-alone.yaml"


def test_loader_compiles_a_retired_rule_never_even_if_its_fact_is_gone() -> None:
    # The sample's retired rule names a fact no longer in the catalogue, and still loads.
    ruleset = load_ruleset(SAMPLE, catalogue=DEFAULT_CATALOGUE)
    with pytest.raises(KeyError):
        ruleset.rule("hypoventilation-old")


def test_loader_rejects_a_path_that_is_not_a_directory(tmp_path: Path) -> None:
    with pytest.raises(RuleSetError) as caught:
        load_ruleset(tmp_path / "absent", catalogue=DEFAULT_CATALOGUE)
    assert "not a directory" in str(caught.value)


def test_loader_rejects_a_rule_set_without_manifest() -> None:
    files = documents(rules=[rule()])
    del files["ruleset.yaml"]
    with pytest.raises(RuleSetError) as caught:
        build_ruleset(files, catalogue=DEFAULT_CATALOGUE)
    [problem] = caught.value.problems
    _located(problem, "ruleset.yaml", None, "")
    assert "no manifest" in problem.message


def test_loader_reports_manifest_yaml_errors_with_position() -> None:
    problem = only_problem(raw={"ruleset.yaml": b"id: [unclosed\n"})
    _located(problem, "ruleset.yaml", None, "")
    assert "line" in problem.message


def test_loader_reports_manifest_fields_by_path() -> None:
    problem = only_problem(manifest(owner="someone"))
    _located(problem, "ruleset.yaml", None, "owner")


def test_loader_reports_rule_yaml_errors_per_file() -> None:
    problem = only_problem(raw={"broken.yaml": b"id: x\n  bad indent: [\n"})
    _located(problem, "broken.yaml", None, "")


def test_loader_reports_rule_schema_errors_with_the_field_path() -> None:
    data = rule("r", when={"all": [leaf("spo2", "lt", 90, "%"), {"fact": "spo2", "lt": "low"}]})
    _located(only_problem(rules=[data]), "r.yaml", "r", "when.all[1].lt")


def test_loader_rejects_an_id_that_differs_from_the_file_name() -> None:
    files = documents(rules=[rule("right-name")])
    files["wrong-name.yaml"] = files.pop("right-name.yaml")
    with pytest.raises(RuleSetError) as caught:
        build_ruleset(files, catalogue=DEFAULT_CATALOGUE)
    [problem] = caught.value.problems
    _located(problem, "wrong-name.yaml", "right-name", "id")
    assert "rename the file to right-name.yaml" in problem.hint


def test_loader_rejects_duplicate_id() -> None:
    files = documents(rules=[rule("twin")], folders={"twin": "a"})
    files["b/twin.yaml"] = files["a/twin.yaml"]
    with pytest.raises(RuleSetError) as caught:
        build_ruleset(files, catalogue=DEFAULT_CATALOGUE)
    [problem] = caught.value.problems
    _located(problem, "b/twin.yaml", "twin", "id")
    assert "also used by a/twin.yaml" in problem.message


def test_loader_rejects_an_active_rule_in_the_retired_folder() -> None:
    problem = only_problem(rules=[rule("old")], folders={"old": "retired"})
    _located(problem, "retired/old.yaml", "old", "status")


def test_loader_rejects_a_retired_rule_outside_the_retired_folder() -> None:
    problem = only_problem(rules=[rule("old", status="retired")])
    _located(problem, "old.yaml", "old", "status")


def test_loader_refuses_yml_files_instead_of_skipping_them(tmp_path: Path) -> None:
    files = documents(rules=[rule("a")])
    files["b.yml"] = files["a.yaml"]
    with pytest.raises(RuleSetError) as caught:
        load_ruleset(write_tree(tmp_path, files), catalogue=DEFAULT_CATALOGUE)
    [problem] = caught.value.problems
    _located(problem, "b.yml", None, "")


def test_loader_ignores_hidden_and_non_yaml_files(tmp_path: Path) -> None:
    files = documents(rules=[rule("a")])
    files["README.md"] = b"# notes"
    files[".editor/a.yaml"] = b"not: [valid"
    files[".#a.yaml"] = b"not: [valid"
    ruleset = load_ruleset(write_tree(tmp_path, files), catalogue=DEFAULT_CATALOGUE)
    assert [rule.id for rule in ruleset.rules] == ["a"]


@pytest.mark.parametrize(
    ("when", "field", "message"),
    [
        (leaf("arterial_p02", "gt", 60, MMHG), "when.fact", "did you mean arterial_po2"),
        (leaf("arterial_pco2", "is", True), "when.is", "does not apply to quantity"),
        (leaf("specimen_unknown", "gt", 1), "when.gt", "does not apply to boolean"),
        (leaf("arterial_pco2", "in", ["high"]), "when.in", "does not apply to quantity"),
        (leaf("oxygen_device", "eq", 1), "when.eq", "does not apply to code"),
        (leaf("arterial_pco2", "gt", 45), "when.unit", "has no unit"),
        (leaf("arterial_pco2", "gt", 6, "kPa"), "when.unit", "differs from the catalogue unit"),
        (leaf("specimen_unknown", "is", True, "1"), "when.unit", "has no unit"),
        (leaf("arterial_pco2", "gt", {"param": "nope"}, MMHG), "when.gt.param", "unknown param"),
        (leaf("spo2", "lt", {"param": "hypercapnia_threshold"}, "%"), "when.lt.param", "is in"),
        (leaf("oxygen_device", "in", ["tent"]), "when.in", "unknown code(s) tent"),
        (leaf("spo2", "between", [95, 90], "%"), "when.between", "inverted"),
        (leaf("fio2", "gt", 21, "1"), "when.gt", "outside the accepted range of fio2"),
        (leaf("fio2", "between", [0.21, 40], "1"), "when.between[1]", "outside"),
        ({"ref": "hypercapnea"}, "when.ref", "did you mean hypercapnia"),
        ({"not": {"any": [{"ref": "missing_block"}]}}, "when.not.any[0].ref", "unknown block"),
    ],
)
def test_loader_rejects_a_leaf_that_does_not_fit_the_catalogue(
    when: dict[str, Any], field: str, message: str
) -> None:
    problem = only_problem(rules=[rule("r", when=when)])
    _located(problem, "r.yaml", "r", field)
    assert message in problem.message


@pytest.mark.parametrize(
    ("rationale", "message"),
    [
        ("PaCO2 {arterial_pc02}.", "neither a fact nor a parameter"),
        ("PaCO2 {arterial_pco2:.1f}.", "not a bare name"),
        ("PaCO2 {arterial_pco2!r}.", "not a bare name"),
        ("PaCO2 {arterial_pco2.real}.", "not a bare name"),
        ("PaCO2 {arterial_pco2[0]}.", "not a bare name"),
        ("Open { brace.", "malformed placeholder"),
    ],
)
def test_loader_rejects_unknown_or_complex_placeholders(rationale: str, message: str) -> None:
    problem = only_problem(rules=[rule("r", rationale=rationale)])
    _located(problem, "r.yaml", "r", "rationale")
    assert message in problem.message


def test_loader_accepts_placeholders_for_facts_and_parameters() -> None:
    data = rule("r", rationale="{arterial_pco2} vs {hypercapnia_threshold}, {{literal}}")
    assert build(rules=[data]).rule("r").rationale.facts == ("arterial_pco2",)


def test_loader_reports_a_broken_block_once_at_the_manifest() -> None:
    blocks = {"hypercapnia": leaf("arterial_pco2", "gt", 45)}  # no unit
    data = [rule(f"r{i}", when={"ref": "hypercapnia"}) for i in range(3)]
    problem = only_problem(manifest(blocks=blocks), data)
    _located(problem, "ruleset.yaml", None, "blocks.hypercapnia.unit")


def test_loader_reports_an_unused_broken_block() -> None:
    blocks = {"hypercapnia": {"ref": "nowhere"}}
    _located(only_problem(manifest(blocks=blocks)), "ruleset.yaml", None, "blocks.hypercapnia.ref")


@pytest.mark.parametrize(
    ("blocks", "cycle"),
    [
        ({"a": {"ref": "a"}}, "a -> a"),
        ({"a": {"not": {"ref": "b"}}, "b": {"all": [{"ref": "a"}]}}, "a -> b -> a"),
        ({"a": {"ref": "b"}, "b": {"ref": "c"}, "c": {"any": [{"ref": "a"}]}}, "a -> b -> c -> a"),
    ],
)
def test_loader_rejects_blocks_that_refer_to_each_other_in_a_cycle(
    blocks: dict[str, Any], cycle: str
) -> None:
    rules = [rule("r", when={"ref": next(iter(blocks))})]
    problem = only_problem(manifest(blocks=blocks), rules)
    assert problem.file == "ruleset.yaml"
    assert problem.field.startswith("blocks.")
    assert cycle in problem.message


def test_loader_resolves_nested_blocks() -> None:
    blocks = {
        "hypercapnia": leaf("arterial_pco2", "gt", 45, MMHG),
        "hypercapnic_on_air": {"all": [{"ref": "hypercapnia"}, leaf("fio2", "le", 0.21, "1")]},
    }
    ruleset = build(manifest(blocks=blocks), [rule("r", when={"ref": "hypercapnic_on_air"})])
    assert [leaf.fact for leaf in ruleset.leaves] == ["arterial_pco2", "fio2"]


def _parameter(**changes: Any) -> dict[str, Any]:
    base: dict[str, Any] = {
        "value": 45, "unit": MMHG, "description": "d", "minimum": 40, "maximum": 55, "source": "s"
    }  # fmt: skip
    base.update(changes)
    return base


@pytest.mark.parametrize(
    ("name", "changes", "field", "message"),
    [
        ("limit", {"value": 70}, "parameters.limit.value", "outside 40 to 55"),
        ("limit", {"minimum": 60}, "parameters.limit.minimum", "minimum is above maximum"),
        ("spo2", {}, "parameters.spo2", "has the name of a fact"),
    ],
)
def test_loader_rejects_a_parameter_that_is_out_of_its_own_range_or_misnamed(
    name: str, changes: dict[str, Any], field: str, message: str
) -> None:
    data = manifest(parameters={name: _parameter(**changes)}, blocks={})
    problem = only_problem(data)
    _located(problem, "ruleset.yaml", None, field)
    assert message in problem.message


def test_loader_requires_a_discriminator_for_a_possible_grade() -> None:
    data = rule("r", outcome=mechanism("shunt", "possible", 5), when={"ref": "hypercapnia"})
    _located(only_problem(rules=[data]), "r.yaml", "r", "discriminator")


def test_loader_rejects_a_discriminator_on_a_grade_other_than_possible() -> None:
    data = rule(
        "r",
        outcome=mechanism("shunt", "likely", 5),
        discriminator={"text": "t", "requests": ["mixed_venous_po2"]},
    )
    _located(only_problem(rules=[data]), "r.yaml", "r", "discriminator")


def test_loader_rejects_a_discriminator_requesting_an_unknown_fact() -> None:
    data = rule(
        "r",
        outcome=mechanism("shunt", "possible", 5),
        discriminator={"text": "t", "requests": ["spo2", "bubble_study"]},
    )
    _located(only_problem(rules=[data]), "r.yaml", "r", "discriminator.requests[1]")


def test_loader_rejects_active_rules_grading_one_mechanism_differently_at_one_priority() -> None:
    rules = [
        rule("a", outcome=mechanism("shunt", "likely", 10)),
        rule("b", outcome=mechanism("shunt", "unlikely", 10)),
        rule("c", outcome=mechanism("vq-mismatch", "unlikely", 10)),
    ]
    found = problems(rules=rules)
    assert [(p.file, p.rule_id, p.field) for p in found] == [
        ("a.yaml", "a", "outcome.priority"),
        ("b.yaml", "b", "outcome.priority"),
    ]
    assert "a (likely), b (unlikely)" in found[0].message


@pytest.mark.parametrize(
    ("second_status", "second_grade"), [("testing", "unlikely"), ("active", "likely")]
)
def test_loader_allows_same_priority_when_grades_agree_or_one_rule_is_testing(
    second_status: str, second_grade: str
) -> None:
    rules = [
        rule("a", outcome=mechanism("shunt", "likely", 10)),
        rule("b", outcome=mechanism("shunt", second_grade, 10), status=second_status),
    ]
    assert len(build(rules=rules).rules) == 2


def test_loader_collects_all_problems_from_all_files_into_one_error() -> None:
    rules = [
        rule("a", when=leaf("nope", "lt", 1, "1")),
        rule("b", rationale="{nope}"),
        rule("c", outcome=finding("made-up", "error")),
    ]
    found = problems(rules=rules)
    assert {(p.file, p.field) for p in found} == {
        ("a.yaml", "when.fact"),
        ("b.yaml", "rationale"),
        ("c.yaml", "outcome.finding.code"),
    }


def test_rule_set_error_text_names_file_rule_field_and_fix() -> None:
    with pytest.raises(RuleSetError) as caught:
        build_ruleset(
            documents(rules=[rule("r", when=leaf("spo2", "lt", 90))]),
            catalogue=DEFAULT_CATALOGUE,
            source="site-x",
        )
    text = str(caught.value)
    assert text.startswith("rule set site-x has 1 problem:")
    assert (
        'r.yaml rule r field when.unit: comparison on spo2 has no unit (fix: add unit: "%"' in text
    )


def test_loader_applies_a_site_override_to_the_parameter_and_its_leaves() -> None:
    ruleset = build(
        rules=[rule("r", when={"ref": "hypercapnia"})], overrides={"hypercapnia_threshold": 50}
    )
    parameter = ruleset.parameters["hypercapnia_threshold"]
    assert (parameter.value, parameter.default, parameter.overridden) == (50.0, 45.0, True)
    assert ruleset.leaves[0].threshold == 50.0
    assert ruleset.overrides == {"hypercapnia_threshold": 50.0}


@pytest.mark.parametrize(
    ("overrides", "message"),
    [
        ({"hypercapnea_threshold": 50}, "unknown parameter hypercapnea_threshold"),
        ({"hypercapnia_threshold": 80}, "outside 40 to 55"),
        ({"hypercapnia_threshold": True}, "not a number"),
        ({"hypercapnia_threshold": float("nan")}, "not finite"),
    ],
)
def test_loader_rejects_an_override_that_is_unknown_or_out_of_range(
    overrides: dict[str, Any], message: str
) -> None:
    problem = only_problem(overrides=overrides)
    assert problem.file == "(overrides)"
    assert problem.field == f"parameters.{next(iter(overrides))}"
    assert message in problem.message


def _hash(files: dict[str, bytes], overrides: dict[str, float] | None = None) -> str:
    return build_ruleset(files, catalogue=DEFAULT_CATALOGUE, overrides=overrides).content_hash


def test_content_hash_is_the_same_for_the_same_content(tmp_path: Path) -> None:
    files = documents(rules=[rule("a"), rule("b")], folders={"b": "sub"})
    reordered = dict(reversed(list(files.items())))
    first = load_ruleset(
        write_tree(tmp_path / "one", files), catalogue=DEFAULT_CATALOGUE
    ).content_hash
    second = load_ruleset(
        write_tree(tmp_path / "two", reordered), catalogue=DEFAULT_CATALOGUE
    ).content_hash
    assert first == second == _hash(files)
    assert len(first) == 64


def test_content_hash_changes_when_any_byte_of_any_file_changes() -> None:
    files = documents(rules=[rule("a")])
    baseline = _hash(files)
    for name in files:
        changed = dict(files)
        changed[name] = files[name] + b"\n# comment\n"
        assert _hash(changed) != baseline, name


def test_content_hash_changes_when_a_file_moves() -> None:
    files = documents(rules=[rule("a")])
    moved = documents(rules=[rule("a")], folders={"a": "findings"})
    assert _hash(files) != _hash(moved)


def test_content_hash_covers_retired_rules() -> None:
    plain = documents(rules=[rule("a")])
    with_retired = documents(
        rules=[rule("a"), rule("old", status="retired")], folders={"old": "retired"}
    )
    assert _hash(plain) != _hash(with_retired)


def test_content_hash_ignores_files_the_loader_does_not_read(tmp_path: Path) -> None:
    files = documents(rules=[rule("a")])
    bare = load_ruleset(
        write_tree(tmp_path / "bare", files), catalogue=DEFAULT_CATALOGUE
    ).content_hash
    files["README.md"] = b"notes"
    assert (
        load_ruleset(
            write_tree(tmp_path / "noted", files), catalogue=DEFAULT_CATALOGUE
        ).content_hash
        == bare
    )


def test_content_hash_includes_overrides_canonically() -> None:
    files = documents(rules=[rule("a")])
    plain = _hash(files)
    as_int = _hash(files, {"hypercapnia_threshold": 50})
    as_float = _hash(files, {"hypercapnia_threshold": 50.0})
    other = _hash(files, {"hypercapnia_threshold": 51})
    assert as_int == as_float
    assert len({plain, as_int, other}) == 3
    assert _hash(files, {}) == plain


def test_content_hash_separates_path_from_content() -> None:
    # Length prefixes stop bytes moving between a name and a body from colliding.
    assert content_hash({"ab": b"c"}, {}) != content_hash({"a": b"bc"}, {})
