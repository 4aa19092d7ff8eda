"""Running fixtures, JUnit output, explain, and the CLI's `test` summary."""

from __future__ import annotations

import re
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import orjson
import pytest

from service.fhir.extract import read_bundle
from service.runtime import Runtime
from service.workbench.expectations import find_cases
from service.workbench.explain import explain_json, explain_text
from service.workbench.junit import junit_xml
from service.workbench.runner import run_cases, summary_line

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "fixtures" / "demo"


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def _case_copy(tmp_path: Path, expect: str, known_gap: str | None = None) -> Path:
    bundle = DEMO / "post-operative-drowsiness.bundle.json"
    tmp_path.mkdir(parents=True, exist_ok=True)
    (tmp_path / "case.bundle.json").write_bytes(bundle.read_bytes())
    gap = f"known_gap: {known_gap}\n" if known_gap else ""
    # The demo case's own findings: expectations are closed-world.
    findings = "  findings: [acute-respiratory-acidosis, hypercapnia, hypoxaemia-mild]\n"
    (tmp_path / "case.expected.yaml").write_text(
        f"description: invented copy of a demo case\nexpect:\n{findings}{expect}\n{gap}"
    )
    return tmp_path


def test_an_unexpected_finding_fails_unless_it_is_allowed(tmp_path: Path, runtime: Runtime) -> None:
    # Closed world: the demo raises hypercapnia and hypoxaemia-mild too; listing only one
    # finding fails.
    bundle = DEMO / "post-operative-drowsiness.bundle.json"
    (tmp_path / "case.bundle.json").write_bytes(bundle.read_bytes())
    expected = tmp_path / "case.expected.yaml"
    head = "description: invented copy\nexpect:\n  findings: [acute-respiratory-acidosis]\n"
    expected.write_text(head)
    (result,) = run_cases(find_cases([tmp_path]), runtime)
    assert [(m.what, m.expected, m.got) for m in result.mismatches] == [
        ("finding hypercapnia", "not expected", "present"),
        ("finding hypoxaemia-mild", "not expected", "present"),
    ]
    expected.write_text(head + "  allowed_findings: [hypercapnia, hypoxaemia-mild]\n")
    (allowed,) = run_cases(find_cases([tmp_path]), runtime)
    assert allowed.held
    expected.write_text("description: invented copy\nexpect:\n  pattern: single\n")
    (silent,) = run_cases(find_cases([tmp_path]), runtime)
    assert {m.what for m in silent.mismatches} == {
        "finding acute-respiratory-acidosis",
        "finding hypercapnia",
        "finding hypoxaemia-mild",
    }


def test_a_wrong_expectation_fails_with_a_table(tmp_path: Path, runtime: Runtime) -> None:
    folder = _case_copy(tmp_path, "  pattern: mixed\n  mechanisms: {shunt: likely}")
    (result,) = run_cases(find_cases([folder]), runtime)
    assert result.status == "failed"
    assert [(m.what, m.expected, m.got) for m in result.mismatches] == [
        ("pattern", "mixed", "single"),
        ("mechanism shunt", "likely", "unlikely"),
    ]
    assert summary_line([result]) == "0 passed, 1 failed"


def test_a_known_gap_is_expected_to_fail_and_flagged_when_it_passes(
    tmp_path: Path, runtime: Runtime
) -> None:
    failing = _case_copy(tmp_path / "a", "  pattern: mixed", known_gap="awaiting a rule")
    (gap,) = run_cases(find_cases([failing]), runtime)
    assert (gap.status, gap.passed) == ("known-gap", True)
    closed = _case_copy(tmp_path / "b", "  pattern: single", known_gap="was a gap")
    (result,) = run_cases(find_cases([closed]), runtime)
    assert (result.status, result.passed) == ("gap-closed", False)


def test_junit_xml_counts_failures(tmp_path: Path, runtime: Runtime) -> None:
    folder = _case_copy(tmp_path, "  pattern: mixed")
    results = run_cases(find_cases([folder, DEMO]), runtime)
    suite = ET.fromstring(junit_xml(results))
    assert suite.get("tests") == str(len(results))
    assert suite.get("failures") == "1"
    failure = suite.find("testcase/failure")
    assert failure is not None and "pattern" in (failure.text or "")


def test_cli_test_prints_a_table_and_the_summary_line(tmp_path: Path) -> None:
    folder = _case_copy(tmp_path, "  pattern: mixed")
    done = subprocess.run(
        [sys.executable, "-m", "service.cli", "test", str(folder), str(DEMO)],
        capture_output=True,
        text=True,
        check=False,
    )
    assert done.returncode == 1
    assert "what     expected  got" in done.stdout
    assert done.stdout.strip().endswith("4 passed, 1 failed")


def test_explain_shows_reads_equations_conditions_and_verdict(runtime: Runtime) -> None:
    data = orjson.loads((DEMO / "post-operative-drowsiness.bundle.json").read_bytes())
    intake = read_bundle(data)
    assessment = runtime.assess_intake(intake)
    text = explain_text(intake, assessment, settings=runtime.settings, full=True)
    assert "Observation/g1-2019-8" in text  # the source of each value read
    # A saturation is shown as it was sent (91 %), not as the fraction used inside (0.91 1).
    assert re.search(r"arterial_so2\s+91 %", text) and "0.91 1" not in text
    assert "alveolar gas equation, full form" in text  # the equation of a derived value
    # PaCO2 65 against the sea-level limit 45 (common practice) plus the site margin 0.
    assert "[true]    paco2_above_limit 20 mm[Hg] > 0 mm[Hg] (paco2_margin)" in text
    assert "missing: mixed_venous_so2" in text  # an unknown condition names its missing fact
    assert "Verdict: single" in text
    as_json = explain_json(intake, assessment, settings=runtime.settings)
    assert as_json["verdict"]["pattern"] == "single"
    assert {r["state"] for r in as_json["rules"]} == {"true", "false", "unknown"}
