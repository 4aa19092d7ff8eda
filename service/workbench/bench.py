"""What the rule owner's bench shows, as plain data: the HTTP route (``service.api.bench``)
serves it and the page's script only lays it out.

Everything here goes through the service's own path: a case is read by the service's readers
(``case_input``), assessed by the loaded ``Runtime``, explained by ``explain``, drawn by the
report's charts (``waterfall``, ``cascade``); a what-if is the same case with inputs changed
(``whatif``) and assessed again; a fixture is written from what the service read
(``service.fhir.intake_bundle``) with an expected outcome taken from assessing that very
Bundle, so that ``oxyrule test`` passes it. Nothing is kept between calls.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import orjson
import yaml
from pydantic import ValidationError

from service.assess.partition import PART_LABELS, PART_MEANINGS, assessment_partitions
from service.assess.presentation import (
    QUANTITY_ORDER,
    PressureUnit,
    pressure_label,
    quantity,
)
from service.assess.result import CAUTION, Assessment
from service.demo import SCENARIOS, demo_dir
from service.engine import Truth
from service.fhir.extract import read_bundle
from service.fhir.intake_bundle import intake_bundle
from service.intake.model import Intake
from service.physiology.units import kpa_from_mmhg, mmhg_from_kpa
from service.runtime import Runtime

from .cascade import build_cascade, cascade_svg
from .case_input import CaseInput, read_case
from .expectations import (
    ExpectedOutcome,
    FixtureError,
    check,
    default_fixture_dirs,
    find_cases,
)
from .explain import explain_json
from .report import MECHANISM_NAMES, cascade_input
from .response_chart import chart_data, response_svg
from .runner import CaseResult, run_cases, summary_line
from .waterfall import waterfall_svg
from .whatif import FIELDS, WhatIf, apply_what_if

# Labels of the derived values the bench lists (the others keep their code as label).
NUMBER_LABELS = {
    "barometric-pressure": "barometric pressure",
    "water-vapour-pressure": "water vapour pressure",
    "fio2": "FiO2",
    "inspired-po2": "inspired PO2",
    "alveolar-po2": "alveolar PO2",
    "aa-gradient": "A-a gradient",
    "aa-gradient-upper-limit": "A-a limit for age",
    "room-air-alveolar-po2": "alveolar PO2 on room air",
    "room-air-pao2": "PaO2 on room air (a/A)",
    "pao2-expected": "PaO2 expected for age",
    "pao2-lower-limit": "PaO2 lower limit for age",
    "paco2-upper-limit": "PaCO2 limit for the setting",
    "a-a-ratio": "a/A ratio",
    "pf-ratio": "P/F ratio",
    "sf-ratio": "S/F ratio",
    "arterial-o2-content": "arterial O2 content",
    "shunt-fraction": "shunt fraction",
    "venous-admixture": "venous admixture",
    "shunt-dissolved-bound": "shunt at least",
    "imputed-pao2": "PaO2 imputed from SpO2",
    "expected-hco3": "expected HCO3",
}
# What-if input -> the fact that holds its value as assessed.
WHAT_IF_FACTS = {
    "fio2": "fio2",
    "altitude_m": "altitude",
    "barometric_pressure_mmhg": "barometric_pressure",
    "age_years": "age",
    "paco2_mmhg": "arterial_pco2",
    "haemoglobin_g_dl": "haemoglobin",
}
# Derived values a saved fixture pins, with the tolerance of each (its display precision).
PINNED = {"alveolar-po2": 0.5, "aa-gradient": 0.5, "pf-ratio": 1.0}
SAFE_NAME = re.compile(r"[^a-z0-9]+")


class BenchError(ValueError):
    """A request the bench cannot answer: ``problems`` say what and where (no value quoted)."""

    def __init__(self, problems: list[str]) -> None:
        self.problems = problems
        super().__init__("; ".join(problems))


@dataclass(frozen=True, slots=True)
class Assessed:
    """One case as read, as assessed (with any what-if) and what the service answered."""

    case: CaseInput
    intake: Intake
    assessment: Assessment
    as_sent: Assessment
    result: dict[str, Any]


def what_if_from(values: dict[str, Any], unit: PressureUnit) -> WhatIf:
    """The what-if of a request (pressures in ``unit``), checked."""
    canonical: dict[str, float] = {}
    for key, value in values.items():
        if value is None:
            continue
        if not isinstance(value, int | float) or isinstance(value, bool):
            raise BenchError([f"what_if.{key}: a number is needed"])
        number = float(value)
        if key.endswith("_mmhg") and unit == "kPa":
            number = mmhg_from_kpa(number)
        canonical[key] = number
    try:
        return WhatIf.of(canonical)
    except ValueError as exc:
        raise BenchError([f"what_if.{exc}"]) from None


def assess_case(runtime: Runtime, raw: bytes, what_if: WhatIf, unit: PressureUnit) -> Assessed:
    """Read ``raw``, assess it as sent and, with a what-if, again with its inputs changed."""
    try:
        case = read_case(raw, runtime)
    except ValueError as exc:
        problems = getattr(exc, "problems", [str(exc)])
        raise BenchError(list(problems)) from None
    as_sent = runtime.assess_intake(case.intake, pressure_unit=unit)
    intake = case.intake
    assessment = as_sent
    if not what_if.empty:
        intake = apply_what_if(case.intake, as_sent.index.gas, what_if)
        assessment = runtime.assess_intake(intake, pressure_unit=unit)
    result = runtime.render(assessment, pressure_unit=unit)
    return Assessed(case, intake, assessment, as_sent, result)


def _shown(value: float, unit: str, pressure_unit: PressureUnit) -> tuple[float, str]:
    if unit == "mm[Hg]" and pressure_unit == "kPa":
        return kpa_from_mmhg(value), "kPa"
    return value, unit


def _what_if_fields(done: Assessed, unit: PressureUnit) -> list[dict[str, Any]]:
    sent, now = done.as_sent.index.facts, done.assessment.index.facts
    fields = []
    for f in FIELDS:
        fact = WHAT_IF_FACTS[f.key]
        low, high, step, start = f.low, f.high, f.step, f.start
        shown_unit = {"1": "", "a": "years"}.get(f.unit, f.unit)
        if f.unit == "mm[Hg]":
            low, _ = _shown(low, f.unit, unit)
            high, _ = _shown(high, f.unit, unit)
            start, _ = _shown(start, f.unit, unit)
            step = 0.1 if unit == "kPa" else step
        value_sent, value_now = sent.get(fact), now.get(fact)
        fields.append(
            {
                "key": f.key,
                "label": f.label,
                "unit": pressure_label(unit) if f.unit == "mm[Hg]" else shown_unit,
                "low": round(low, 2),
                "high": round(high, 2),
                "step": step,
                "start": round(start, 2),
                "sent": _number(value_sent, f.unit, unit),
                "value": _number(value_now, f.unit, unit),
            }
        )
    return fields


def _number(value: object, unit: str, pressure_unit: PressureUnit) -> float | None:
    if not isinstance(value, float | int) or isinstance(value, bool):
        return None
    shown, _ = _shown(float(value), unit, pressure_unit)
    return round(shown, 3)


def _numbers(a: Assessment, unit: PressureUnit) -> list[dict[str, Any]]:
    derived = a.index.derived
    out = []
    for name in QUANTITY_ORDER:
        d = derived.get(name)
        if d is None:
            continue
        q = quantity(name, d.value, d.unit, unit)
        shown_unit = {"mm[Hg]": "mmHg", "1": ""}.get(q["unit"], q["unit"])
        out.append(
            {
                "name": name,
                "label": NUMBER_LABELS.get(name, name),
                "value": q["value"],
                "unit": shown_unit,
                "method": d.method,
            }
        )
    return out


def _partition(done: Assessed, runtime: Runtime, unit: PressureUnit) -> dict[str, Any]:
    gas = next(g for g in assessment_partitions(done.assessment, runtime.settings) if g.index)
    if not gas.shown:
        return {"absent": gas.absent, "charts": []}
    charts = []
    for n, shown in enumerate(gas.shown, start=1):
        d = shown.partition
        charts.append(
            {
                "assumption": shown.assumption,
                "svg": waterfall_svg(
                    shown, title="PaO2 deficit partition", chart_id=f"bench-deficit-{n}"
                ),
                "expected": quantity("", d.expected_pao2, "mm[Hg]", unit)["value"],
                "pao2": quantity("", d.arterial_po2, "mm[Hg]", unit)["value"],
                "fall": quantity("", d.fall, "mm[Hg]", unit)["value"],
                "rows": [
                    {
                        "part": key,
                        "label": PART_LABELS[key],
                        "value": quantity("", value, "mm[Hg]", unit)["value"],
                        "share": shown.share(value),
                        "meaning": PART_MEANINGS[key],
                    }
                    for key, value in shown.parts
                ],
                "method": shown.method,
            }
        )
    return {"absent": None, "charts": charts, "unit": pressure_label(unit)}


def _cascade(done: Assessed, runtime: Runtime) -> dict[str, Any] | None:
    cascade = build_cascade(cascade_input(done.assessment, runtime))
    if not cascade.drawable:
        return None
    return {
        "svg": cascade_svg(cascade, title="Oxygen cascade", chart_id="bench-cascade"),
        "notes": list(cascade.notes),
        "conditions": cascade.conditions,
    }


def _response_charts(a: Assessment) -> list[dict[str, str]]:
    """The fitted response to oxygen, drawn as the report draws it (saturation and PaO2
    against FiO2), when the record holds a titration that was fitted; empty otherwise."""
    t = a.titration
    if t is None or t.fit is None:
        return []
    charts = []
    for measure, words in (("saturation", "Saturation"), ("pao2", "PaO2")):
        data = chart_data(t, age_years=a.index.number("age"), quantity=measure)
        charts.append(
            {
                "svg": response_svg(
                    data, title=f"{words} against FiO2", chart_id=f"bench-response-{measure}"
                ),
                "caption": (
                    f"{words} against FiO2: the patient's points (circles SpO2, squares gases, "
                    "crosses left out), the fitted curve (thick solid line, hatched 95 % range), "
                    "a healthy lung of the same age (dashed) and named iso-shunt lines (dotted). "
                    + " ".join(data.notes)
                ),
            }
        )
    return charts


def _reference_text(reference: dict[str, Any]) -> str:
    """A Reference as one line: its address, else its identifier's value, else its display
    (service.fhir.addresses: an input entry without a resolvable address has one of those)."""
    identifier = reference.get("identifier") or {}
    return str(
        reference.get("reference") or identifier.get("value") or reference.get("display", "")
    )


def _oxygen_response(result: dict[str, Any]) -> dict[str, Any]:
    """What the result says about the response to oxygen, read generically from its data:
    every assessed gas's values (FiO2, P/F, A-a gradient, admixture), and any parameter or
    Observation the result names ``oxygen-response`` (its parts as they are)."""
    parameters: dict[str, Any] = next(
        (e["resource"] for e in result["entry"] if e["resource"]["resourceType"] == "Parameters"),
        {"parameter": []},
    )
    gases = []
    wanted = ("fio2", "pf-ratio", "aa-gradient", "a-a-ratio", "venous-admixture")
    for p in parameters["parameter"]:
        if p["name"] != "gas":
            continue
        row: dict[str, Any] = {}
        for part in p.get("part", []):
            if part["name"] == "index":
                row["index"] = part["valueBoolean"]
            elif part["name"] == "observation":
                row["observation"] = _reference_text(part["valueReference"])
            elif part["name"] in wanted and "valueQuantity" in part:
                row[part["name"]] = part["valueQuantity"]
        gases.append(row)
    fits = [p for p in parameters["parameter"] if p["name"].startswith("oxygen-response")]
    observations = [
        e["resource"]
        for e in result["entry"]
        if e["resource"]["resourceType"] == "Observation"
        and e["resource"].get("id", "").startswith("oxygen-response")
    ]
    return {"gases": gases, "parameters": fits, "observations": observations}


def _expected(text: str | None, a: Assessment) -> dict[str, Any] | None:
    if not text:
        return None
    try:
        outcome = ExpectedOutcome.model_validate(yaml.safe_load(text))
    except (yaml.YAMLError, ValidationError) as exc:
        return {"error": f"the expected outcome cannot be read: {_first_line(exc)}"}
    mismatches = check(outcome.expect, a)
    held = not mismatches
    status = (
        ("gap-closed" if held else "known-gap")
        if outcome.known_gap
        else ("passed" if held else "failed")
    )
    return {
        "description": outcome.description,
        "status": status,
        "mismatches": [_row(m) for m in mismatches],
    }


def _row(m: Any) -> dict[str, str]:
    return {"what": m.what, "expected": m.expected, "got": m.got, "unit": m.unit}


def _first_line(exc: Exception) -> str:
    return str(exc).splitlines()[0][:200]


def view(
    runtime: Runtime,
    raw: bytes,
    *,
    what_if: WhatIf,
    unit: PressureUnit,
    expected: str | None = None,
) -> dict[str, Any]:
    """Everything the bench shows of one case (see the module docstring)."""
    done = assess_case(runtime, raw, what_if, unit)
    a = done.assessment
    explained = explain_json(
        done.intake,
        a,
        settings=runtime.settings,
        site=runtime.site_view,
        pressure_unit=unit,
        shared_blocks=True,
    )
    verdict = explained["verdict"]
    for m in verdict["mechanisms"]:
        m["name"] = MECHANISM_NAMES.get(m["code"], m["code"])
    return {
        "kind": done.case.kind,
        "ruleset": a.ruleset_identity,
        "site": explained["site"],
        "units": pressure_label(unit),
        "verdict": verdict,
        "uncertain_inputs": explained["uncertain_inputs"],
        "partition": _partition(done, runtime, unit),
        "cascade": _cascade(done, runtime),
        "oxygen_response": {**_oxygen_response(done.result), "charts": _response_charts(a)},
        "numbers": _numbers(a, unit),
        "deciding": explained["deciding"],
        "blocks": explained["blocks"],
        "outranked": explained["outranked"],
        "rules": [
            {k: r[k] for k in ("rule", "title", "state", "shadow", "role", "tree", "rationale")}
            for r in explained["rules"]
        ],
        "what_if": {"fields": _what_if_fields(done, unit), "changed": not what_if.empty},
        "expected": _expected(expected, a),
        "caution": CAUTION,
    }


# --- Scenarios and fixtures ---------------------------------------------------------------


def scenarios() -> list[dict[str, str]]:
    """The built-in invented scenarios (the demo's), name and words."""
    return [{"name": name, "label": label} for name, label in SCENARIOS]


def scenario(name: str) -> dict[str, str]:
    """One scenario's Bundle as text (the page holds it and sends it back to assess)."""
    for known, label in SCENARIOS:
        if known == name:
            text = (demo_dir() / f"{name}.bundle.json").read_text(encoding="utf-8")
            return {"name": name, "label": label, "input": text}
    raise BenchError([f"no scenario named {name!r}"])


def fixture_dirs(runtime: Runtime, configured: Path | None) -> list[Path]:
    """The rule set's fixtures: the configured folder, else the one beside the rule set."""
    if configured is not None:
        return [configured] if configured.is_dir() else []
    beside = runtime.settings.rules_dir.resolve().parent / "fixtures"
    return [beside] if beside.is_dir() else default_fixture_dirs(runtime.settings.rules_dir)


def _status_row(r: CaseResult) -> dict[str, Any]:
    return {
        "name": r.case.name,
        "status": r.status,
        "passed": r.passed,
        "description": r.case.outcome.description,
        "error": r.error,
        "mismatches": [_row(m) for m in r.mismatches],
        "pattern": r.assessment.pattern.value if r.assessment is not None else None,
    }


def run_fixtures(runtime: Runtime, folders: list[Path]) -> dict[str, Any]:
    """Every fixture of ``folders`` run, with each failure's differences."""
    if not folders:
        raise BenchError(
            ["no fixture folder: set OXYRULE_FIXTURES_DIR or keep fixtures/ beside the rules"]
        )
    try:
        cases = find_cases(folders)
    except FixtureError as exc:
        raise BenchError([str(exc)]) from None
    results = run_cases(cases, runtime)
    return {
        "folders": [str(f) for f in folders],
        "summary": summary_line(results),
        "passed": sum(r.passed for r in results),
        "failed": sum(not r.passed for r in results),
        "cases": [_status_row(r) for r in results],
    }


def fixture_case(folders: list[Path], name: str) -> dict[str, str]:
    """One fixture's input and expected outcome, by the name ``run_fixtures`` gave it (only
    those names: nothing else of the file system is reachable)."""
    try:
        cases = {c.name: c for c in find_cases(folders)}
    except FixtureError as exc:
        raise BenchError([str(exc)]) from None
    case = cases.get(name)
    if case is None:
        raise BenchError([f"no fixture named {name!r}"])
    return {
        "name": name,
        "input": case.bundle_path.read_text(encoding="utf-8"),
        "expected": case.expected_path.read_text(encoding="utf-8"),
    }


def _fixture_name(name: str) -> str:
    cleaned = SAFE_NAME.sub("-", name.lower()).strip("-")
    return cleaned[:80] or "bench-case"


def _fired(a: Assessment) -> list[str]:
    """The deciding rules that fired as the inputs were sent (a grade decided at an end of an
    uncertain input's range has rules that are unknown there: a fixture cannot pin them)."""
    deciding = {ref for m in a.mechanisms for ref in m.rules}
    return sorted(
        r.rule.id for r in a.evaluation.results if r.ref in deciding and r.state is Truth.TRUE
    )


def export_fixture(
    runtime: Runtime,
    raw: bytes,
    *,
    what_if: WhatIf,
    name: str,
    description: str,
) -> dict[str, Any]:
    """A fixture of the case as assessed (with its what-if): the Bundle the service read and an
    expected outcome taken from assessing that Bundle, as ``oxyrule test`` will."""
    done = assess_case(runtime, raw, what_if, runtime.settings.pressure_unit)
    stem = _fixture_name(name)
    bundle = intake_bundle(done.intake, bundle_id=stem)
    again = runtime.assess_intake(read_bundle(bundle, concept_map=runtime.concept_map))
    expect: dict[str, Any] = {
        "pattern": again.pattern.value,
        "status": again.status.value,
        "hypoxaemia": again.hypoxaemia.value,
        "mechanisms": {m.code.value: m.grade.value for m in again.mechanisms},
        "findings": sorted({f.code for f in again.findings}),
        "rules_fire": _fired(again),
        "derived": {
            key: {"value": round(d.value, 2), "unit": d.unit, "tolerance": tolerance}
            for key, tolerance in PINNED.items()
            if (d := again.index.derived.get(key)) is not None
        },
    }
    text = description.strip() or "Invented case saved from the bench."
    document = {"description": text, "bundle": f"{stem}.bundle.json", "expect": expect}
    expected = (
        "# Saved from the oxyrule bench. Check that the case is invented before committing it.\n"
        + yaml.safe_dump(document, sort_keys=False, allow_unicode=True)
    )
    return {
        "files": [
            {
                "name": f"{stem}.bundle.json",
                "text": orjson.dumps(bundle, option=orjson.OPT_INDENT_2).decode() + "\n",
            },
            {"name": f"{stem}.expected.yaml", "text": expected},
        ]
    }
