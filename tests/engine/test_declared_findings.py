"""Finding codes are data: a rule set declares its own in ``ruleset.yaml`` (``findings:``), the
rules use them like the built-in ones, and every renderer carries them with the rule set's own
code system. An undeclared code is a load error that says how to declare it."""

from __future__ import annotations

import shutil
from pathlib import Path
from typing import Any

import orjson
import yaml

from service.config import Settings
from service.engine import evaluate
from service.engine.loader import BUILT_IN_FINDINGS
from service.fhir.models import validate_resource
from service.runtime import Runtime
from service.workbench.lint import lint
from tests.contract_shape import contract_problems
from tests.engine.builders import build, finding, manifest, problems, rule

ROOT = Path(__file__).resolve().parents[2]
CODE = "ward-escalation-review"
DECLARATION = {
    CODE: {
        "display": "Review against the ward escalation plan",
        "description": "Invented site finding for tests: PaCO2 above the site's limit.",
    }
}


def test_an_undeclared_finding_code_is_refused_with_how_to_declare_it() -> None:
    (problem,) = problems(rules=[rule("site-rule", outcome=finding(CODE, "warning"))])
    assert (problem.file, problem.rule_id, problem.field) == (
        "site-rule.yaml",
        "site-rule",
        "outcome.finding.code",
    )
    assert f"unknown finding code {CODE}" in problem.message
    assert "ruleset.yaml" in problem.hint and "findings:" in problem.hint
    assert "code change" in problem.hint  # it says none is needed


def test_a_misspelt_built_in_code_gets_a_suggestion() -> None:
    (problem,) = problems(rules=[rule("r", outcome=finding("hypercapnea", "warning"))])
    assert "did you mean hypercapnia" in problem.message


def test_a_declared_code_is_raised_like_a_built_in_one() -> None:
    ruleset = build(
        manifest(findings=DECLARATION),
        [rule("site-rule", outcome=finding(CODE, "warning"), when={"ref": "hypercapnia"})],
    )
    declared = ruleset.findings[CODE]
    assert declared.display == DECLARATION[CODE]["display"]
    assert declared.system == "urn:oxyrule:ruleset:test-rules:finding"
    (raised,) = evaluate(ruleset, {"arterial_pco2": 60.0}).verdict.findings
    assert raised.code == CODE


def test_declaring_a_built_in_code_is_refused() -> None:
    declaration = {"hypercapnia": {"display": "x", "description": "y"}}
    (problem,) = problems(manifest(findings=declaration))
    assert problem.field == "findings.hypercapnia"
    assert "built-in" in problem.message


def test_the_built_in_codes_are_all_still_accepted() -> None:
    for code in sorted(BUILT_IN_FINDINGS):
        build(rules=[rule("r", outcome=finding(code, "information"))])


def _site_rules(tmp_path: Path, *, declare: bool, about: str | None = None) -> Path:
    rules = tmp_path / "rules"
    shutil.copytree(ROOT / "rules", rules)
    manifest_path = rules / "ruleset.yaml"
    data: dict[str, Any] = yaml.safe_load(manifest_path.read_text())
    if declare:
        data["findings"] = {
            code: {**declared, **({"about": about} if about else {})}
            for code, declared in DECLARATION.items()
        }
        data["finding_system"] = "https://invented-district-hospital.example/findings"
    manifest_path.write_text(yaml.safe_dump(data, sort_keys=False))
    (rules / "context" / f"{CODE}.yaml").write_text(
        yaml.safe_dump(
            {
                "id": CODE,
                "version": "1.0.0",
                "title": "Hypercapnia at this site",
                "status": "active",
                "description": "Invented site rule for tests.",
                "references": ["Invented site protocol (tests only)"],
                "outcome": {"finding": {"code": CODE, "severity": "warning"}},
                "when": {"ref": "hypercapnia"},
                "rationale": "PaCO2 {arterial_pco2} is above the site's limit.",
            },
            sort_keys=False,
        )
    )
    return rules


def test_lint_explains_how_to_declare_a_site_code(tmp_path: Path) -> None:
    messages = [str(m) for m in lint(_site_rules(tmp_path, declare=False))]
    (message,) = [m for m in messages if CODE in m]
    assert "outcome.finding.code" in message
    assert "declare this one in ruleset.yaml under `findings:`" in message


def test_a_site_code_reaches_the_fhir_and_hl7_results(tmp_path: Path) -> None:
    from service.hl7v2.handle import handle_v2

    runtime = Runtime.load(Settings(rules_dir=_site_rules(tmp_path, declare=True)))
    # Invented demo case: PaCO2 65 mmHg at sea level raises the site finding.
    case = ROOT / "fixtures" / "demo" / "post-operative-drowsiness.bundle.json"
    result = runtime.assess_bundle(orjson.loads(case.read_bytes()))
    assert contract_problems(result) == []
    resources = {e["resource"]["resourceType"]: e["resource"] for e in result["entry"]}
    validate_resource(result)  # still a valid FHIR R4B Bundle
    parameters = resources["Parameters"]["parameter"]
    codes = [
        next(p["valueCode"] for p in f["part"] if p["name"] == "code")
        for f in parameters
        if f["name"] == "finding"
    ]
    assert CODE in codes
    # A declared code is about the patient unless it says otherwise: clinical context,
    # carried as a component of the mechanism assessment beside the built-in ones.
    mechanism = next(
        e["resource"] for e in result["entry"] if e["resource"].get("id") == "mechanism-assessment"
    )
    components = [c["code"]["coding"][0] for c in mechanism.get("component", [])]
    (coding,) = [c for c in components if c["code"] == CODE]
    assert coding == {
        "system": "https://invented-district-hospital.example/findings",
        "code": CODE,
        "display": DECLARATION[CODE]["display"],
    }
    hypercapnia = next(c for c in components if c["code"] == "hypercapnia")
    assert hypercapnia["system"] == "https://oxyrule.org/fhir/CodeSystem/finding"
    assert "DetectedIssue" not in resources  # not a problem with the data
    message = (ROOT / "fixtures" / "hl7v2" / "post-operative-drowsiness.hl7").read_text()
    reply = handle_v2(message, runtime, reply="result").body.decode()
    assert f"{CODE}^Review against the ward escalation plan^99OXYSFN" in reply


def test_a_site_code_about_the_data_is_a_data_quality_issue(tmp_path: Path) -> None:
    runtime = Runtime.load(Settings(rules_dir=_site_rules(tmp_path, declare=True, about="data")))
    case = ROOT / "fixtures" / "demo" / "post-operative-drowsiness.bundle.json"
    result = runtime.assess_bundle(orjson.loads(case.read_bytes()))
    assert contract_problems(result) == []
    validate_resource(result)
    issues = [
        e["resource"] for e in result["entry"] if e["resource"]["resourceType"] == "DetectedIssue"
    ]
    (issue,) = [i for i in issues if i["code"]["coding"][0]["code"] == CODE]
    assert issue["code"]["coding"][0]["system"] == (
        "https://invented-district-hospital.example/findings"
    )
    assert issue["severity"] == "moderate"  # a warning (R4 detectedissue-severity)
    mechanism = next(
        e["resource"] for e in result["entry"] if e["resource"].get("id") == "mechanism-assessment"
    )
    assert CODE not in [c["code"]["coding"][0]["code"] for c in mechanism.get("component", [])]


def test_a_declaration_says_patient_or_data_and_nothing_else() -> None:
    bad = {CODE: {**DECLARATION[CODE], "about": "analyser"}}
    (problem,) = problems(manifest(findings=bad), [])
    assert problem.field == f"findings.{CODE}.about"
