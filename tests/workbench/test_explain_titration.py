"""``oxyrule explain`` on a titration: the points, the fit, how the rules used it, the
predictions with the caution, and the trend (fixtures made by ``tests.titration_reference``)."""

from __future__ import annotations

from pathlib import Path

import orjson
import pytest

from service.fhir.extract import read_bundle
from service.physiology.oxygen_prediction import CAUTION
from service.runtime import Runtime
from service.workbench.explain import explain_json, explain_text

FIXTURES = Path(__file__).resolve().parents[2] / "fixtures" / "cases" / "titration"


def _explained(name: str) -> tuple[str, dict[str, object]]:
    runtime = Runtime.load()
    intake = read_bundle(orjson.loads((FIXTURES / f"{name}.bundle.json").read_bytes()))
    a = runtime.assess_intake(intake)
    return (
        explain_text(intake, a, settings=runtime.settings),
        explain_json(intake, a, settings=runtime.settings),
    )


def test_explain_shows_the_points_the_fit_and_how_the_rules_used_it() -> None:
    text, data = _explained("shunt-pneumonia-venturi")
    section = text[text.index("Response to oxygen") : text.index("Trend over the gases")]
    assert "8 points on 5 FiO2 levels" in section
    assert section.count(" on FiO2 ") >= 8  # a line per point
    assert "shunt 22." in section and "95 % range" in section and "with the assumptions" in section
    assert "shunt-likely-fitted@1.0.0 — decided shunt: likely" in section
    assert "vq-mismatch-unlikely-fitted@1.0.0 — decided vq-mismatch: unlikely" in section
    assert "predicted (model estimate):" in section and CAUTION in section
    assert text.index("Verdict:") < text.index("Response to oxygen") < text.index("Rules")
    response = data["oxygen_response"]
    assert isinstance(response, dict)
    assert response["model"] == "shunt-and-vq"
    assert response["shunt"]["value"] == pytest.approx(0.22, abs=0.03)  # the truth, 22 %
    assert {r["rule"] for r in response["rules"] if r["state"] == "true"} >= {
        "shunt-likely-fitted@1.0.0",
        "gas-exchange-defect-fitted@1.0.0",
    }


def test_explain_says_when_the_comparison_outranked_an_unidentified_fit() -> None:
    text, _ = _explained("icu-fio2-steps")
    assert "two-parameter fit refused: the V/Q term is not identified" in text
    assert "shunt-possible-fit-unidentified@1.0.0 — outranked by shunt-likely-fixed@1.0.0" in text
    assert "Trend over the gases: " in text and "pf_ratio" in text


def test_explain_shows_a_poor_fit_and_the_rules_that_held_the_grades() -> None:
    text, data = _explained("poor-fit-deteriorating")
    assert "shunt-possible-fit-poor@1.0.0 — decided shunt: possible" in text
    assert "do not fit one constant shunt and V/Q term" in text
    response = data["oxygen_response"]
    assert isinstance(response, dict) and response["fit_probability"] < 0.01
