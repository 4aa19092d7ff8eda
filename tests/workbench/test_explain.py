"""``oxyrule explain``: the verdict first, then the deciding rules as trees, then the PaO2
deficit partition as a table (checked against ``tests.deficit_reference``: Cerveri 1995 and
the alveolar gas equation), then the inputs known only as a range and how each grade depended
on them; the rest with ``--full``."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import orjson
import pytest

from service.cli import main
from service.fhir.extract import read_bundle
from service.runtime import Runtime
from service.workbench.explain import explain_json, explain_text
from tests.deficit_reference import reference, reference_bundle
from tests.fhir.builders import bundle, observation, patient

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def _row(text: str, label: str) -> list[str]:
    """The cells after ``label`` on its line of the partition table."""
    table = text[text.index("PaO2 deficit partition") :]
    line = next(line for line in table.splitlines() if line.strip().startswith(label))
    return line.strip()[len(label) :].split()


def test_explain_leads_with_the_verdict_then_the_partition_then_the_uncertain_inputs(
    runtime: Runtime,
) -> None:
    intake = read_bundle(reference_bundle())
    assessment = runtime.assess_intake(intake)
    text = explain_text(intake, assessment, settings=runtime.settings, full=True)
    headings = [
        "Verdict: ",
        "Deciding rules",
        "PaO2 deficit partition",
        "Uncertain inputs",
        "Rule set ",
        "Read",
        "Derived",
        "Rules",
    ]
    positions = [text.index(h) for h in headings]
    assert positions == sorted(positions) and positions[0] == 0
    assert re.search(r"^  why: .+", text, flags=re.MULTILINE)
    short = explain_text(intake, assessment, settings=runtime.settings)
    assert "Deciding rules" in short and "\nRead" not in short and "\nDerived" not in short
    assert "explain --full" in short


def test_the_partition_table_matches_the_independent_computation(runtime: Runtime) -> None:
    ref = reference()
    intake = read_bundle(reference_bundle())
    text = explain_text(intake, runtime.assess_intake(intake), settings=runtime.settings)
    assert float(_row(text, "expected PaO2 for age (sea level, air)")[0]) == pytest.approx(
        ref.expected, abs=0.05
    )
    gross = ref.ventilation + ref.gas_exchange  # the inspired part is 0: all that lowers it
    for label, value in (("ventilation", ref.ventilation), ("gas exchange", ref.gas_exchange)):
        cells = _row(text, label)
        assert float(cells[0]) == pytest.approx(value, abs=0.05), label
        assert cells[1] == f"{value / gross:.0%}", label
    assert float(_row(text, "fall")[0]) == pytest.approx(ref.fall, abs=0.05)
    assert "unattributed" not in text.split("Uncertain inputs")[0]


def test_the_json_partition_has_parts_shares_and_the_fall(runtime: Runtime) -> None:
    ref = reference()
    intake = read_bundle(reference_bundle())
    data = explain_json(intake, runtime.assess_intake(intake), settings=runtime.settings)
    assert list(data)[:3] == ["verdict", "partition", "uncertain_inputs"]
    (partition,) = data["partition"]
    assert partition["observation"] == "Observation/pao2" and partition["index"] is True
    assert partition["expected_pao2"] == pytest.approx(ref.expected, abs=1e-3)
    assert partition["fall"] == pytest.approx(ref.fall, abs=1e-3)
    parts = {p["part"]: p for p in partition["parts"]}
    for key, value in ref.parts().items():
        assert parts[key]["value"] == pytest.approx(value, abs=1e-3), key
    gross = ref.ventilation + ref.gas_exchange
    assert parts["gas-exchange"]["share"] == pytest.approx(ref.gas_exchange / gross, abs=1e-4)
    assert data["uncertain_inputs"] == {"inputs": [], "grades": []}


def test_uncertain_inputs_are_listed_with_how_each_grade_depended_on_them(
    runtime: Runtime,
) -> None:
    # No FiO2 sent: assessed from room air to pure oxygen. The PaO2 on air would need a large
    # A-a gradient, on oxygen an enormous one: grades that differ are `possible` and say so.
    data = bundle(
        patient(),
        observation("2703-7", 50.0, "mm[Hg]", oid="pao2"),
        observation("2019-8", 55.0, "mm[Hg]", oid="paco2"),
        observation("76268-2", 760.0, "mm[Hg]", oid="pb"),
    )
    intake = read_bundle(data)
    assessment = runtime.assess_intake(intake)
    as_json = explain_json(intake, assessment, settings=runtime.settings)
    uncertain = as_json["uncertain_inputs"]
    assert any(what.startswith("FiO2 (not sent") for what in uncertain["inputs"])
    grades = {g["mechanism"]: g for g in uncertain["grades"]}
    assert set(grades) == {m.code for m in assessment.mechanisms}
    for m in assessment.mechanisms:
        g = grades[m.code]
        assert g["grade"] == m.grade
        if g["depends"]:
            assert g["grade"] == "possible" and g["how"].startswith("Depends on FiO2")
        else:
            assert g["how"] == "the same grade at every end of the ranges"
    text = explain_text(intake, assessment, settings=runtime.settings)
    section = text.split("Uncertain inputs")[1].split("Rule set")[0]
    assert "FiO2 (not sent" in section and "how each grade depended on them" in section
    # No FiO2: no partition, and the table says why instead of showing zeros.
    assert "not computed (FiO2 not known" in text


def test_the_cli_explains_in_text_and_json(capsys: pytest.CaptureFixture[str]) -> None:
    demo = ROOT / "fixtures" / "demo" / "post-operative-drowsiness.bundle.json"
    assert main(["explain", str(demo)]) == 0
    assert capsys.readouterr().out.startswith("Verdict: ")
    assert main(["explain", "--format", "json", str(demo)]) == 0
    assert '"partition"' in capsys.readouterr().out


_RANK = {"false": 0, "unknown": 1, "true": 2}


def _kleene(node: dict[str, Any]) -> None:
    """Every node's value follows from its parts by three-valued logic (Kleene 1952: `all` is
    the minimum and `any` the maximum with false < unknown < true; `not` swaps true and false)."""
    kids = node.get("children", [])
    for kid in kids:
        _kleene(kid)
    states = [k["state"] for k in kids]
    if node["kind"] == "all":
        assert node["state"] == min(states, key=_RANK.__getitem__)
    elif node["kind"] == "any":
        assert node["state"] == max(states, key=_RANK.__getitem__)
    elif node["kind"] == "not":
        assert node["state"] == {"true": "false", "false": "true", "unknown": "unknown"}[states[0]]
    elif node["kind"] == "definitely":
        assert node["state"] == ("true" if states[0] == "true" else "false")
    elif node["kind"] == "ref":
        assert node["state"] == states[0]


def _shape(node: dict[str, Any]) -> Any:
    """The tree's shape as the rule file writes it: kinds, block names and leaf facts."""
    if node["kind"] == "leaf":
        return node["text"].split()[0]
    if node["kind"] == "ref":
        return {"ref": node["name"]}
    return {node["kind"]: [_shape(c) for c in node["children"]]}


def _written(condition: Any) -> Any:
    if "fact" in condition:
        return condition["fact"]
    if "ref" in condition:
        return {"ref": condition["ref"]}
    (kind, parts), *_ = condition.items()
    return {kind: [_written(p) for p in (parts if isinstance(parts, list) else [parts])]}


def test_every_rule_trace_is_a_tree_as_written_and_its_values_follow_three_valued_logic(
    runtime: Runtime,
) -> None:
    import yaml

    case = ROOT / "fixtures" / "cases" / "principles" / "p08-pressure-not-sent.bundle.json"
    intake = read_bundle(orjson.loads(case.read_bytes()))
    data = explain_json(intake, runtime.assess_intake(intake), settings=runtime.settings)
    files = {
        yaml.safe_load(p.read_text())["id"]: yaml.safe_load(p.read_text())
        for p in (ROOT / "rules").rglob("*.yaml")
        if p.name not in ("ruleset.yaml",)
    }
    kinds: set[str] = set()
    for rule in data["rules"]:
        _kleene(rule["tree"])
        rule_id = rule["rule"].split("@")[0]
        assert _shape(rule["tree"]) == _written(files[rule_id]["when"]), rule_id
        stack = [rule["tree"]]
        while stack:
            node = stack.pop()
            kinds.add(node["kind"])
            stack += node.get("children", [])
    assert {"all", "any", "not", "ref", "leaf"} <= kinds


def test_a_true_rule_above_unknown_leaves_shows_why_and_outranked_rules_are_marked(
    runtime: Runtime,
) -> None:
    demo = ROOT / "fixtures" / "demo" / "post-operative-drowsiness.bundle.json"
    intake = read_bundle(orjson.loads(demo.read_bytes()))
    assessment = runtime.assess_intake(intake)
    data = explain_json(intake, assessment, settings=runtime.settings)
    # PaCO2 65 mmHg at sea level: hypoventilation likely (priority 10) outranks the minor
    # hypoventilation rule that fired too.
    (outranked,) = [o for o in data["outranked"] if o["mechanism"] == "hypoventilation"]
    assert outranked["rule"].startswith("hypoventilation-possible-minor@")
    assert outranked["outranked_by"] == [
        r for m in assessment.mechanisms if m.code == "hypoventilation" for r in m.rules
    ]
    assert outranked["priority"] > outranked["winning_priority"]
    roles = {r["rule"]: r["role"] for r in data["rules"]}
    assert roles[outranked["rule"]] == "outranked for hypoventilation"
    text = explain_text(intake, assessment, settings=runtime.settings)
    assert "Fired but outranked" in text and outranked["rule"] in text
    # A rule that is true although some of its leaves are unknown: the tree says which part
    # decided (a true `any` shows its true part and counts the others).
    lines = text.splitlines()
    assert lines[0].startswith("Verdict: single")
    deciding = lines.index(next(line for line in lines if line.startswith("Deciding rules")))
    assert deciding < 20  # the verdict's lines come first, then the deciding rules
    assert any("any of  (" in line and "other part" in line for line in lines[deciding:])
    full = explain_text(intake, assessment, settings=runtime.settings, full=True)
    assert len(text.splitlines()) < len(full.splitlines()) / 3
