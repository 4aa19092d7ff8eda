"""Building small rule sets in memory for tests: dicts in, `RuleSet` or problems out."""

from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import pytest
import yaml

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine import RuleProblem, RuleSet, RuleSetError, build_ruleset

MMHG = "mm[Hg]"


def manifest(**changes: Any) -> dict[str, Any]:
    """A valid manifest with one parameter and one block, updated by `changes`."""
    base: dict[str, Any] = {
        "id": "test-rules",
        "version": "1.0.0",
        "title": "Test rules",
        "description": "Invented rules for engine tests.",
        "parameters": {
            "hypercapnia_threshold": {
                "value": 45,
                "unit": MMHG,
                "description": "PaCO2 above this is hypercapnia.",
                "minimum": 40,
                "maximum": 55,
                "source": "Invented for tests.",
            }
        },
        "blocks": {
            "hypercapnia": {
                "fact": "arterial_pco2",
                "gt": {"param": "hypercapnia_threshold"},
                "unit": MMHG,
            }
        },
    }
    base.update(changes)
    return base


def rule(rule_id: str = "sample-rule", **changes: Any) -> dict[str, Any]:
    """A valid active finding rule named `rule_id`, updated by `changes`."""
    base: dict[str, Any] = {
        "id": rule_id,
        "version": "1.0.0",
        "title": f"Rule {rule_id}",
        "status": "active",
        "description": "Invented for tests.",
        "references": ["Invented reference"],
        "outcome": {"finding": {"code": "paco2-missing", "severity": "warning"}},
        "when": {"fact": "arterial_pco2", "present": False},
        "rationale": "PaCO2 is {arterial_pco2}.",
    }
    base.update(changes)
    return base


def mechanism(code: str, grade: str, priority: int) -> dict[str, Any]:
    """A mechanism outcome."""
    return {"mechanism": {"code": code, "grade": grade}, "priority": priority}


def finding(code: str, severity: str) -> dict[str, Any]:
    """A finding outcome."""
    return {"finding": {"code": code, "severity": severity}}


def leaf(fact: str, operator: str, threshold: Any, unit: str | None = None) -> dict[str, Any]:
    """A condition leaf; `unit` is added only when given."""
    node: dict[str, Any] = {"fact": fact, operator: threshold}
    if unit is not None:
        node["unit"] = unit
    return node


def documents(
    manifest_data: Mapping[str, Any] | None = None,
    rules: Iterable[Mapping[str, Any]] = (),
    *,
    folders: Mapping[str, str] | None = None,
) -> dict[str, bytes]:
    """File contents for a rule set; `folders` maps a rule id to its subfolder."""
    files = {"ruleset.yaml": _dump(manifest_data if manifest_data is not None else manifest())}
    for data in rules:
        folder = (folders or {}).get(str(data["id"]), "")
        path = f"{folder}/{data['id']}.yaml" if folder else f"{data['id']}.yaml"
        files[path] = _dump(data)
    return files


def build(
    manifest_data: Mapping[str, Any] | None = None,
    rules: Iterable[Mapping[str, Any]] = (),
    *,
    overrides: Mapping[str, float] | None = None,
    folders: Mapping[str, str] | None = None,
) -> RuleSet:
    """Build a rule set from dicts."""
    return build_ruleset(
        documents(manifest_data, rules, folders=folders),
        catalogue=DEFAULT_CATALOGUE,
        overrides=overrides,
        source="test",
    )


def problems(
    manifest_data: Mapping[str, Any] | None = None,
    rules: Iterable[Mapping[str, Any]] = (),
    *,
    overrides: Mapping[str, float] | None = None,
    folders: Mapping[str, str] | None = None,
    raw: Mapping[str, bytes] | None = None,
) -> list[RuleProblem]:
    """The problems a broken rule set raises; fails the test if it loads."""
    files = documents(manifest_data, rules, folders=folders)
    files.update(raw or {})
    with pytest.raises(RuleSetError) as caught:
        build_ruleset(files, catalogue=DEFAULT_CATALOGUE, overrides=overrides, source="test")
    return caught.value.problems


def only_problem(*args: Any, **kwargs: Any) -> RuleProblem:
    """The single problem a broken rule set raises."""
    found = problems(*args, **kwargs)
    assert len(found) == 1, "\n".join(str(problem) for problem in found)
    return found[0]


def write_tree(root: Path, files: Mapping[str, bytes]) -> Path:
    """Write `files` below `root` and return `root`."""
    for name, data in files.items():
        path = root / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(data)
    return root


def _dump(data: Mapping[str, Any]) -> bytes:
    return yaml.safe_dump(dict(data), sort_keys=False).encode("utf-8")
