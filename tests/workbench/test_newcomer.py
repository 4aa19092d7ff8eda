"""A newcomer adds a rule as rules/README.md describes, makes the usual mistakes, and lint and
test say exactly what is wrong until it is right."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

from service.config import Settings
from service.runtime import Runtime
from service.workbench.expectations import find_cases
from service.workbench.lint import lint
from service.workbench.lock import write_lock
from service.workbench.runner import run_cases, summary_line

ROOT = Path(__file__).resolve().parents[2]
RULE_ID = "hypoventilation-possible-raised-bicarbonate"

FIRST_DRAFT = """\
id: hypoventilation-possible-bicarbonate
version: 1.0.0
title: Raised bicarbonate without a PaCO2
status: active
description: A raised HCO3 hints at chronic hypercapnia when no PaCO2 was sent.
references: []
outcome:
  mechanism: {code: hypoventilation, grade: possible}
  priority: 25
when:
  all:
    - {fact: arterial_pco2, present: false}
    - {fact: arterial_hco3, gt: 30, unit: "mmol"}
rationale: HCO3 {arterial_hco3} is raised and PaCO2 is not known.
"""

FIXED = """\
id: hypoventilation-possible-raised-bicarbonate
version: 1.0.0
title: Raised bicarbonate without a PaCO2
status: active
description: A raised HCO3 hints at chronic hypercapnia when no PaCO2 was sent.
references:
  - "Berend K, de Vries APJ, Gans ROB, NEJM 2014;371:1434 (compensation of chronic hypercapnia)"
outcome:
  mechanism: {code: hypoventilation, grade: possible}
  priority: 25
when:
  all:
    - {fact: arterial_pco2, present: false}
    - {fact: arterial_hco3, gt: 30, unit: "mmol/L"}
rationale: HCO3 {arterial_hco3} is raised and PaCO2 is not known.
discriminator:
  text: An arterial gas with PaCO2 shows whether ventilation is adequate.
  requests: [arterial_pco2]
"""


def _observation(code: str, value: float, unit: str) -> dict[str, object]:
    return {
        "resourceType": "Observation",
        "id": f"o-{code}",
        "meta": {
            "tag": [
                {"system": "http://terminology.hl7.org/CodeSystem/v3-ActReason", "code": "HTEST"}
            ]
        },
        "status": "final",
        "code": {"coding": [{"system": "http://loinc.org", "code": code}]},
        "effectiveDateTime": "2026-11-20T10:00:00+00:00",
        "valueQuantity": {"value": value, "system": "http://unitsofmeasure.org", "code": unit},
    }


def _write_case(folder: Path) -> None:
    """Invented: an arterial gas sent without its PaCO2, HCO3 34 mmol/L, room air."""
    folder.mkdir(parents=True)
    bundle = {
        "resourceType": "Bundle",
        "type": "collection",
        "entry": [
            {"resource": _observation("2703-7", 58, "mm[Hg]")},
            {"resource": _observation("1960-4", 34, "mmol/L")},
            {"resource": _observation("3150-0", 21, "%")},
        ],
    }
    (folder / "raised-bicarbonate.bundle.json").write_text(json.dumps(bundle))
    (folder / "raised-bicarbonate.expected.yaml").write_text(
        "description: Invented. Arterial gas without PaCO2, HCO3 34 on room air.\n"
        "expect:\n"
        f"  rules_fire: [{RULE_ID}]\n"
        "  mechanisms: {hypoventilation: possible}\n"
        "  findings: [paco2-missing, hypoxaemia-moderate]\n"
        "  allowed_findings: [pb-assumed-sea-level]\n"
    )


def test_lint_and_test_guide_a_newcomer_to_a_working_rule(tmp_path: Path) -> None:
    rules = tmp_path / "rules"
    shutil.copytree(ROOT / "rules", rules)
    fixtures = [ROOT / "fixtures", tmp_path / "cases"]
    rule_file = rules / "mechanism" / f"{RULE_ID}.yaml"

    # 1. The first draft has no references: the file's shape is checked first.
    rule_file.write_text(FIRST_DRAFT)
    messages = [str(m) for m in lint(rules, fixtures=fixtures)]
    assert len(messages) == 1
    assert f"mechanism/{RULE_ID}.yaml" in messages[0]
    assert "field references" in messages[0]
    assert "fix:" in messages[0]

    # 2. With a reference, the cross-checks speak: the id is not the file stem, the unit is
    #    not the fact's catalogue unit, and a possible grade needs a discriminator.
    rule_file.write_text(
        FIRST_DRAFT.replace("references: []", 'references: ["Berend 2014, NEJM 371:1434"]')
    )
    messages = [str(m) for m in lint(rules, fixtures=fixtures)]
    text = "\n".join(messages)
    assert "hypoventilation-possible-bicarbonate" in text and RULE_ID in text  # id vs stem
    assert "mmol/L" in text  # the catalogue unit the leaf must state
    assert "discriminator" in text
    assert all("fix:" in m for m in messages)

    # 2. Fixed: the rule loads; lint now asks for the lock and for fixtures.
    rule_file.write_text(FIXED)
    text = "\n".join(str(m) for m in lint(rules, fixtures=fixtures))
    assert "not in the lock file" in text and "--update-lock" in text
    assert "no fixture in which the rule fires" in text

    # 3. The lock recorded, and a fixture in which it fires: lint is clean.
    write_lock(rules, Runtime.load(Settings(rules_dir=rules)).ruleset)
    _write_case(tmp_path / "cases")
    assert [str(m) for m in lint(rules, fixtures=fixtures)] == []
    results = run_cases(find_cases([tmp_path / "cases"]), Runtime.load(Settings(rules_dir=rules)))
    assert summary_line(results) == "1 passed, 0 failed"

    # 4. A threshold changed without a version bump fails lint.
    rule_file.write_text(FIXED.replace("gt: 30", "gt: 32"))
    text = "\n".join(str(m) for m in lint(rules, fixtures=fixtures))
    assert RULE_ID in text and "bump the version" in text
