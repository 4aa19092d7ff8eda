"""The command line: the demo (README quick start) and ``assess`` with its exit codes
(README, Using it: 0 assessed, 2 rejected with its OperationOutcome printed, 1 internal error)."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest

from service.assess.summary import summary_text
from service.cli import main
from service.fhir.extract import read_bundle
from service.runtime import Runtime
from tests.deficit_reference import cerveri_expected_pao2, reference, reference_bundle

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "fixtures" / "demo" / "altitude-visitor.bundle.json"


def run(*args: str, stdin: bytes = b"") -> subprocess.CompletedProcess[bytes]:
    return subprocess.run(
        [sys.executable, "-m", "service.cli", *args], input=stdin, capture_output=True, check=False
    )


def observation(value: Any, unit: str = "mm[Hg]", **extra: Any) -> dict[str, Any]:
    obs: dict[str, Any] = {
        "resourceType": "Observation",
        "status": "final",
        "code": {"coding": [{"system": "http://loinc.org", "code": "2703-7"}]},
        "effectiveDateTime": "2026-11-20T10:00:00Z",
        "valueQuantity": {"value": value, "system": "http://unitsofmeasure.org", "code": unit},
    }
    obs.update(extra)
    return obs


def bundle(*resources: dict[str, Any]) -> bytes:
    entries = [{"resource": r} for r in resources]
    return json.dumps({"resourceType": "Bundle", "type": "collection", "entry": entries}).encode()


def test_demo_prints_each_scenario_and_the_caution(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["demo"]) == 0
    out = capsys.readouterr().out
    assert out.count("Scenario ") == 4
    assert "alveolar PO2" in out
    assert "not a diagnosis" in out


PARTITION_LINE = re.compile(
    r"^(PaO2[^0-9]*) (\S+) vs (\S+) expected for age: fall (\S+) = (.+) mmHg", re.MULTILINE
)


def _number(text: str) -> float:
    return float(text.replace("−", "-"))


def test_demo_states_the_titrations_fit_and_the_fio2_for_its_band(
    capsys: pytest.CaptureFixture[str],
) -> None:
    # The demo's titration (fixtures/demo/venturi-titration, made by tests.titration_reference
    # from shunt 12 %, V/Q term 45 mmHg): one line for the fit, one for the target band.
    assert main(["demo"]) == 0
    out = capsys.readouterr().out
    scenario = out[out.index("Scenario 4") :]
    line = next(x for x in scenario.splitlines() if x.startswith("Response to oxygen:"))
    assert "shunt 12%" in line and "V/Q term 46 mmHg" in line and "fit probability" in line
    assert "target 94–98%: the model predicts SpO2 94% at FiO2 0.25" in scenario
    assert "titrate to the measured SpO2" in scenario


def test_demo_shows_each_scenarios_deficit_partition_adding_up(
    capsys: pytest.CaptureFixture[str],
) -> None:
    assert main(["demo"]) == 0
    scenarios = capsys.readouterr().out.split("Scenario ")[1:]
    assert len(scenarios) == 4
    for text in scenarios:
        lines = PARTITION_LINE.findall(text)
        assert lines, text[:400]
        for _, pao2, expected, fall, parts in lines:
            values = [_number(p.rsplit(" ", 1)[1]) for p in parts.split(" + ")]
            assert _number(expected) - _number(pao2) == pytest.approx(_number(fall), abs=0.1)
            assert sum(values) == pytest.approx(_number(fall), abs=0.2)
    # Scenario 2, a 34-year-old at sea level (born 1992-06-02, gas 2026-11-21): PaO2 62
    # against Cerveri 1995 (regression extrapolated below 40 years).
    post_op = PARTITION_LINE.findall(scenarios[1])[0]
    assert _number(post_op[2]) == pytest.approx(cerveri_expected_pao2(34.0), abs=0.05)
    assert _number(post_op[1]) == 62.0


def test_the_summary_states_the_partition_of_the_reference_patient() -> None:
    # tests.deficit_reference: Cerveri 1995 and the alveolar gas equation, computed there.
    ref = reference()
    runtime = Runtime.load()
    assessment = runtime.assess_intake(read_bundle(reference_bundle()))
    text = summary_text(assessment, settings=runtime.settings)
    assert (
        f"PaO2 50.0 vs {ref.expected:.1f} expected for age: fall {ref.fall:.1f} = "
        f"inspired PO2 0.0 + ventilation {ref.ventilation:.1f} + "
        f"gas exchange {ref.gas_exchange:.1f} mmHg"
    ) in text


def test_assess_prints_a_result_bundle_and_exits_0() -> None:
    done = run("assess", str(DEMO))
    assert done.returncode == 0, done.stderr
    result = json.loads(done.stdout)
    assert result["resourceType"] == "Bundle"
    assert result["entry"][0]["resource"]["resourceType"] == "GuidanceResponse"


def test_assess_reports_pressures_in_kpa_on_request() -> None:
    done = run("assess", "--units", "kPa", str(DEMO))
    params = json.loads(done.stdout)["entry"][1]["resource"]["parameter"]
    pressure = next(p for p in params if p["name"] == "barometric-pressure")
    assert pressure["valueQuantity"]["code"] == "kPa"


@pytest.mark.parametrize(
    ("body", "expression"),
    [
        (b"this is not json", None),  # not a resource: nothing to name
        (json.dumps({"resourceType": "Patient"}).encode(), "Patient"),
        (bundle(observation(80, "psi")), "Bundle.entry[0].resource.valueQuantity.code"),
        (bundle(observation("eighty")), "Bundle.entry[0].resource.valueQuantity.value"),
        (
            bundle(observation(80, effectiveDateTime="yesterday")),
            "Bundle.entry[0].resource.effectiveDateTime",
        ),
    ],
    ids=["not-json", "not-a-bundle", "unknown-unit", "string-for-number", "bad-date"],
)
def test_assess_rejects_bad_input_with_a_located_outcome_and_exit_2(
    body: bytes, expression: str | None
) -> None:
    done = run("assess", "-", stdin=body)
    assert done.returncode == 2
    assert b"Traceback" not in done.stderr
    outcome = json.loads(done.stdout)
    assert outcome["resourceType"] == "OperationOutcome"
    found = [e for i in outcome["issue"] for e in i.get("expression", [])]
    assert found == [] if expression is None else expression in found


def test_an_impossible_fio2_is_reported_and_not_used() -> None:
    fio2 = observation(4.0, "1")
    fio2["code"] = {"coding": [{"system": "http://loinc.org", "code": "71835-3"}]}
    done = run("assess", "-", stdin=bundle(observation(80), fio2))
    # FiO2 4.0 is impossible: reported as value-out-of-range (an error finding), not used.
    result = json.loads(done.stdout)
    params = result["entry"][1]["resource"]["parameter"]
    codes = [p["part"][0]["valueCode"] for p in params if p["name"] == "finding"]
    assert "value-out-of-range" in codes
    assert not any(p["name"] == "fio2" for p in params)
    pattern = next(p["valueCode"] for p in params if p["name"] == "pattern")
    assert pattern == "not-classifiable"


def test_ndjson_answers_every_line_in_order_and_names_broken_lines(tmp_path: Path) -> None:
    good = json.dumps(json.loads(DEMO.read_bytes()))
    source = tmp_path / "many.ndjson"
    source.write_text("\n".join([good, "{broken", good]) + "\n")
    for workers in ("1", "2"):
        done = run("assess", "--workers", workers, str(source))
        lines = [json.loads(x) for x in done.stdout.splitlines()]
        assert [x["resourceType"] for x in lines] == ["Bundle", "OperationOutcome", "Bundle"]
        assert "line 2" in lines[1]["issue"][0]["diagnostics"]
        assert done.returncode == 2


def test_a_broken_rule_directory_exits_1_with_a_message(tmp_path: Path) -> None:
    (tmp_path / "ruleset.yaml").write_text("id: [broken\n")
    done = run("assess", "--rules", str(tmp_path), str(DEMO))
    assert done.returncode == 1
    assert b"ruleset.yaml" in done.stderr
    assert b"Traceback" not in done.stderr
