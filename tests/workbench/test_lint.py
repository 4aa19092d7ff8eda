"""``oxyrule lint``: loader problems, the lock file, unreachable conditions, coverage."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from service.workbench.lint import lint
from service.workbench.lock import write_lock

ROOT = Path(__file__).resolve().parents[2]
RULES = ROOT / "rules"


@pytest.fixture
def rules(tmp_path: Path) -> Path:
    copy = tmp_path / "rules"
    shutil.copytree(RULES, copy)
    return copy


def _messages(directory: Path) -> list[str]:
    return [str(m) for m in lint(directory)]


def test_shipped_rules_lint_clean_apart_from_coverage() -> None:
    # Coverage is checked against the fixtures in test_shipped_rules_are_covered_by_fixtures.
    assert _messages(RULES) == []


def test_shipped_rules_are_covered_by_fixtures() -> None:
    problems = [str(m) for m in lint(RULES, fixtures=[ROOT / "fixtures"])]
    assert problems == []


def test_a_changed_rule_without_a_version_bump_fails(rules: Path) -> None:
    rule = rules / "mechanism" / "hypoventilation-likely.yaml"
    rule.write_text(rule.read_text().replace("title: Hypercapnia", "title: Raised CO2"))
    messages = _messages(rules)
    assert any("hypoventilation-likely" in m and "bump the version" in m for m in messages)


def test_a_version_bump_asks_for_the_lock_to_be_updated(rules: Path) -> None:
    rule = rules / "mechanism" / "hypoventilation-likely.yaml"
    text = rule.read_text().replace("version: 1.0.0", "version: 1.0.1")
    rule.write_text(text.replace("title: Hypercapnia", "title: Raised CO2"))
    messages = _messages(rules)
    assert any("1.0.0 → 1.0.1" in m and "--update-lock" in m for m in messages)


def test_a_deleted_rule_is_refused(rules: Path) -> None:
    (rules / "context" / "hypoxaemia-severe.yaml").unlink()
    messages = _messages(rules)
    assert any("hypoxaemia-severe" in m and "never delete a rule" in m for m in messages)


def test_missing_lock_is_an_error(rules: Path) -> None:
    (rules / "ruleset.lock").unlink()
    assert any("no lock file" in m for m in _messages(rules))


def test_contradictory_condition_is_found(rules: Path) -> None:
    rule = rules / "context" / "hypoxaemia-severe.yaml"
    rule.write_text(
        rule.read_text().replace(
            'when: {fact: arterial_po2, lt: {param: severe_hypoxaemia_pao2}, unit: "mm[Hg]"}',
            "when:\n  all:\n"
            '    - {fact: arterial_po2, lt: 40, unit: "mm[Hg]"}\n'
            '    - {fact: arterial_po2, gt: 60, unit: "mm[Hg]"}',
        )
    )
    write_lock_for(rules)
    messages = _messages(rules)
    assert any("hypoxaemia-severe" in m and "can never be true" in m for m in messages)


def test_a_condition_that_decides_nothing_is_a_warning(rules: Path) -> None:
    rule = rules / "context" / "hypoxaemia-severe.yaml"
    rule.write_text(
        rule.read_text().replace(
            'when: {fact: arterial_po2, lt: {param: severe_hypoxaemia_pao2}, unit: "mm[Hg]"}',
            "when:\n  any:\n"
            '    - {fact: arterial_po2, lt: 40, unit: "mm[Hg]"}\n'
            '    - {fact: arterial_po2, ge: 40, unit: "mm[Hg]"}',
        )
    )
    write_lock_for(rules)
    assert any("decides nothing" in m for m in _messages(rules))


def test_schema_problems_name_file_rule_and_field(rules: Path) -> None:
    rule = rules / "context" / "hypoxaemia-severe.yaml"
    rule.write_text(rule.read_text().replace('unit: "mm[Hg]"', 'unit: "kPa"'))
    messages = _messages(rules)
    assert any(
        "context/hypoxaemia-severe.yaml" in m and "hypoxaemia-severe" in m and "unit" in m
        for m in messages
    )


def write_lock_for(directory: Path) -> None:
    from service.config import Settings
    from service.runtime import Runtime

    write_lock(directory, Runtime.load(Settings(rules_dir=directory)).ruleset)
