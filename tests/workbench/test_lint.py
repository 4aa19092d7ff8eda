"""``oxyrule lint``: loader problems, the lock file, unreachable conditions, coverage."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pytest

from service.engine import RuleSet
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


def _retitle(rule: Path, version: str | None = None) -> str:
    """Change the rule's title (and its version, when given); return the old version."""
    text = rule.read_text()
    old = re.search(r"^version: (\S+)$", text, re.M)
    assert old is not None
    text = re.sub(r"^title: .*$", 'title: "A new title"', text, count=1, flags=re.M)
    if version is not None:
        text = text.replace(f"version: {old.group(1)}", f"version: {version}", 1)
    rule.write_text(text)
    return old.group(1)


def _rewhen(rule: Path, when: str) -> None:
    """Replace the rule's whole condition."""
    text = rule.read_text()
    start, end = text.index("\nwhen:"), text.index("\nrationale:")
    rule.write_text(text[:start] + "\n" + when.rstrip("\n") + text[end:])


def test_shipped_rules_lint_clean_apart_from_coverage() -> None:
    # Coverage is checked against the fixtures in test_shipped_rules_are_covered_by_fixtures.
    assert _messages(RULES) == []


def test_shipped_rules_are_covered_by_fixtures() -> None:
    problems = [str(m) for m in lint(RULES, fixtures=[ROOT / "fixtures"])]
    assert problems == []


def test_a_changed_rule_without_a_version_bump_fails(rules: Path) -> None:
    _retitle(rules / "mechanism" / "hypoventilation-likely.yaml")
    messages = _messages(rules)
    assert any("hypoventilation-likely" in m and "bump the version" in m for m in messages)


def test_a_version_bump_asks_for_the_lock_to_be_updated(rules: Path) -> None:
    old = _retitle(rules / "mechanism" / "hypoventilation-likely.yaml", "9.9.9")
    messages = _messages(rules)
    assert any(f"{old} → 9.9.9" in m and "--update-lock" in m for m in messages)


def test_a_deleted_rule_is_refused(rules: Path) -> None:
    (rules / "context" / "hypoxaemia-severe.yaml").unlink()
    messages = _messages(rules)
    assert any("hypoxaemia-severe" in m and "never delete a rule" in m for m in messages)


def test_missing_lock_is_an_error(rules: Path) -> None:
    (rules / "ruleset.lock").unlink()
    assert any("no lock file" in m for m in _messages(rules))


def test_contradictory_condition_is_found(rules: Path) -> None:
    rule = rules / "context" / "hypoxaemia-severe.yaml"
    _rewhen(
        rule,
        "when:\n  all:\n"
        '    - {fact: arterial_po2, lt: 40, unit: "mm[Hg]"}\n'
        '    - {fact: arterial_po2, gt: 60, unit: "mm[Hg]"}',
    )
    write_lock_for(rules)
    messages = _messages(rules)
    assert any("hypoxaemia-severe" in m and "can never be true" in m for m in messages)


def test_a_condition_that_decides_nothing_is_a_warning(rules: Path) -> None:
    rule = rules / "context" / "hypoxaemia-severe.yaml"
    _rewhen(
        rule,
        "when:\n  any:\n"
        '    - {fact: arterial_po2, lt: 40, unit: "mm[Hg]"}\n'
        '    - {fact: arterial_po2, ge: 40, unit: "mm[Hg]"}',
    )
    write_lock_for(rules)
    assert any("decides nothing" in m for m in _messages(rules))


def test_schema_problems_name_file_rule_and_field(rules: Path) -> None:
    rule = rules / "context" / "hypoxaemia-severe.yaml"
    _rewhen(rule, 'when: {fact: arterial_po2, lt: 40, unit: "kPa"}')
    messages = _messages(rules)
    assert any(
        "context/hypoxaemia-severe.yaml" in m and "hypoxaemia-severe" in m and "unit" in m
        for m in messages
    )


def write_lock_for(directory: Path) -> None:
    from service.config import Settings
    from service.runtime import Runtime

    write_lock(directory, Runtime.load(Settings(rules_dir=directory)).ruleset)


def test_a_mechanism_no_rule_decides_in_a_reachable_state_is_an_error(rules: Path) -> None:
    # Retire the rule that says hypoventilation cannot be judged without a PaCO2: gases
    # without one (and without hypoxaemia to call it possible) are then left undecided.
    rule = rules / "mechanism" / "hypoventilation-not-assessable.yaml"
    (rules / "retired").mkdir(exist_ok=True)
    retired = rule.rename(rules / "retired" / rule.name)
    retired.write_text(retired.read_text().replace("status: active", "status: retired"))
    _retitle(retired, "99.0.0")
    write_lock_for(rules)
    messages = _messages(rules)
    holes = [m for m in messages if "no rule decides hypoventilation" in m]
    assert holes, messages
    assert all("arterial_pco2" not in m.split(":", 1)[1] for m in holes)  # never a PaCO2 there


def test_the_shipped_rules_decide_every_mechanism_in_every_generated_state() -> None:
    from service.config import Settings
    from service.workbench.totality import undecided

    assert undecided(_shipped_ruleset(), settings=Settings(), count=400) == []


def _shipped_ruleset() -> RuleSet:
    from service.runtime import Runtime

    return Runtime.load().ruleset
