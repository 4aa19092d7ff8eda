"""The pressure unit a reader asks for (``--units kPa``, ``?units=kPa``, a kPa site) reaches the
words too: rationales, findings and uncertain inputs say kPa when the numbers are in kPa, and
the terminal texts write units as a reader does (mmHg, not the UCUM code mm[Hg])."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import orjson
import pytest

from service.config import Settings
from service.runtime import Runtime

ROOT = Path(__file__).resolve().parents[1]
# Invented demo case: PaCO2 65 mmHg at sea level, pure hypoventilation.
CASE = ROOT / "fixtures" / "demo" / "post-operative-drowsiness.bundle.json"
# Invented case with no pressure sent: the uncertain input names a pressure range.
NO_PRESSURE = ROOT / "fixtures" / "cases" / "principles" / "p08-pressure-not-sent.bundle.json"
# UCUM: 1 mm[Hg] = 0.1333220 kPa.
KPA_PER_MMHG = 0.1333220


def _texts(result: dict[str, Any]) -> list[str]:
    params = next(
        e["resource"] for e in result["entry"] if e["resource"]["resourceType"] == "Parameters"
    )
    out: list[str] = []
    for p in params["parameter"]:
        if p["name"] == "uncertain-input":
            out.append(p["valueString"])
        for part in p.get("part", []):
            if part["name"] in ("rationale", "message"):
                out.append(part["valueString"])
    return out


def _hypoventilation(result: dict[str, Any]) -> str:
    return next(t for t in _texts(result) if t.startswith("PaCO2") and "lowers the PaO2" in t)


@pytest.mark.parametrize("how", ["argument", "site"])
def test_rationales_follow_the_requested_pressure_unit(how: str, tmp_path: Path) -> None:
    data = orjson.loads(CASE.read_bytes())
    if how == "site":
        site = tmp_path / "site.yaml"
        site.write_text("site: invented-kpa-site\npressure_unit: kPa\n")
        result = Runtime.load(Settings(site_file=site)).assess_bundle(data)
    else:
        result = Runtime.load().assess_bundle(data, pressure_unit="kPa")
    sentence = _hypoventilation(result)
    # 65.0 mmHg = 8.67 kPa; the limit 45.0 mmHg = 6.00 kPa (UCUM factor).
    assert f"PaCO2 {65.0 * KPA_PER_MMHG:.2f} kPa is above {45.0 * KPA_PER_MMHG:.2f} kPa" in sentence
    assert not any("mmHg" in t or "mm[Hg]" in t for t in _texts(result))
    plain = Runtime.load().assess_bundle(data)
    assert _hypoventilation(plain).startswith("PaCO2 65.0 mmHg is above 45.0 mmHg")


def test_an_assumed_pressure_is_worded_in_the_requested_unit() -> None:
    data = orjson.loads(NO_PRESSURE.read_bytes())
    kpa = _texts(Runtime.load().assess_bundle(data, pressure_unit="kPa"))
    (pressure,) = [t for t in kpa if t.startswith("the barometric pressure")]
    assert re.search(r"not sent: \d+\.\d kPa to 101\.3 kPa", pressure), pressure


def test_the_http_units_parameter_reaches_the_rationales() -> None:
    from service.api import create_app
    from tests.api.conftest import ASSESS, FHIR_JSON, TestClient

    with TestClient(create_app(Settings())) as client:
        answer = client.post(f"{ASSESS}?units=kPa", content=CASE.read_bytes(), headers=FHIR_JSON)
    assert answer.status_code == 200
    assert "8.67 kPa" in _hypoventilation(answer.json())


def test_the_demo_writes_units_as_a_reader_does() -> None:
    from service.demo import run_demo

    text = run_demo()
    assert "mm[Hg]" not in text
    assert " mmHg" in text


def test_explain_tells_data_not_sent_from_data_worth_repeating() -> None:
    from service.fhir.extract import read_bundle
    from service.workbench.explain import explain_json, explain_text

    runtime = Runtime.load()
    # Invented demo case at 2,500 m: V/Q mismatch and shunt possible; what would settle them is
    # a gas after a change of FiO2, so FiO2 and PaO2 are asked for although they were sent.
    case = ROOT / "fixtures" / "demo" / "altitude-visitor.bundle.json"
    intake = read_bundle(orjson.loads(case.read_bytes()))
    a = runtime.assess_intake(intake)
    split = explain_json(intake, a, settings=runtime.settings)["verdict"]["data_requested_split"]
    sent = {m.quantity.value for m in intake.measurements}
    assert split["again"] and set(split["again"]) <= sent | set(a.index.facts)
    assert not set(split["not_sent"]) & sent
    text = explain_text(intake, a, settings=runtime.settings)
    assert "data requested:" not in text
    assert "sent, and worth repeating" in text


def test_a_lint_message_names_no_python_function() -> None:
    from tests.engine.builders import problems as build_problems
    from tests.engine.builders import rule

    problems = build_problems(rules=[rule("x", when={"fact": "arterial_pco22", "present": True})])
    hints = " ".join(p.hint for p in problems)
    assert "did you mean" in " ".join(p.message for p in problems)
    assert "catalogue_markdown" not in hints and "rules/README.md" in hints
