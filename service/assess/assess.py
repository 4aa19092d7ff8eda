"""The main job, in process: an ``Intake`` and a loaded rule set in, an ``Assessment`` out.

Pure apart from the clock and the decision id, both injectable: pairing, physiology and the
rule engine, glued together. Every arterial gas gets its derived values; the latest (the
index gas) is evaluated by the rules, with earlier gases on a different FiO2 supplying the
response to oxygen.
"""

from __future__ import annotations

import uuid
from datetime import UTC, datetime, timedelta

from service.config import Settings
from service.engine import Evaluation, Grade, RuleSet, evaluate
from service.engine.results import RuleResult
from service.engine.verdict import MechanismAssessment
from service.intake.model import Intake, Quantity, Specimen

from .derive import FactValue, GasFacts, add_serial_facts, derive_gas_facts
from .pairing import Pairing, pair_gases
from .result import Assessment, Finding, GasResult, MechanismVerdict

DEMOTED_DISCRIMINATOR = (
    "Correct the data problem named in the findings (repeat the sample if needed); the grade "
    "can then be judged on trusted data."
)


def _specimen_flags(pairing: Pairing) -> dict[str, FactValue]:
    excluded = pairing.excluded_specimens
    unknown = any(m.specimen in (Specimen.UNKNOWN, None) for m in excluded)
    not_arterial = bool(pairing.non_arterial_po2) or any(
        m.specimen not in (Specimen.UNKNOWN, None) for m in excluded
    )
    return {"specimen_unknown": unknown, "specimen_not_arterial": not_arterial}


def _checked_facts(
    facts: dict[str, FactValue], ruleset: RuleSet, gas: GasFacts
) -> tuple[dict[str, FactValue], list[Finding]]:
    """Keep the facts the catalogue accepts; report (never pass on) any it refuses."""
    kept: dict[str, FactValue] = {}
    findings: list[Finding] = []
    for name, value in facts.items():
        spec = ruleset.catalogue.get(name)
        problem = None if spec is None else spec.problem(value)
        if spec is None:
            continue  # a fact the site's catalogue does not know: nothing can test it
        if problem is not None:
            findings.append(
                Finding(
                    "value-out-of-range",
                    "warning",
                    f"{name} was not used: {problem}",
                    subject=gas.gas.anchor.source if gas.gas.anchor else None,
                )
            )
            continue
        kept[name] = value
    return kept, findings


_SYMBOL = {"lt": "<", "le": "≤", "gt": ">", "ge": "≥", "eq": "=", "is": "is", "in": "in"}


def _number(value: object) -> str:
    return f"{value:.4g}" if isinstance(value, float) else str(value).lower()


def trace_lines(result: RuleResult) -> tuple[str, ...]:
    """One line per condition of a rule: ``id@version: fact value op threshold → state``."""
    lines = []
    for leaf in result.trace:
        unit = f" {leaf.unit}" if leaf.unit not in (None, "1") else ""
        seen = "missing" if leaf.missing else f"{_number(leaf.value)}{unit}"
        if leaf.operator.value == "present":
            test = f"present is {_number(leaf.threshold)}"
        else:
            named = f" ({', '.join(leaf.parameters)})" if leaf.parameters else ""
            symbol = _SYMBOL.get(leaf.operator.value, leaf.operator.value)
            test = f"{symbol} {_threshold(leaf.threshold)}{unit}{named}"
        lines.append(f"{result.ref}: {leaf.fact} {seen} {test} → {leaf.state.value}")
    return tuple(lines)


def _threshold(threshold: object) -> str:
    if isinstance(threshold, tuple | list):
        return "–".join(_number(t) for t in threshold)
    return _number(threshold)


def _mechanism(item: MechanismAssessment, evaluation: Evaluation) -> MechanismVerdict:
    if item.grade is Grade.NOT_ASSESSABLE:
        missing = _missing_for(item, evaluation)
        rationale = "Not assessable: " + (
            "missing " + ", ".join(missing) if missing else "no rule applied to these data"
        )
        return MechanismVerdict(item.mechanism.value, item.grade.value, rationale, ())
    discriminators = [d.text for d in item.discriminators]
    if item.grade is Grade.POSSIBLE and not discriminators:
        discriminators = [DEMOTED_DISCRIMINATOR]
    return MechanismVerdict(
        code=item.mechanism.value,
        grade=item.grade.value,
        rationale=" ".join(item.rationales),
        rules=item.rules,
        discriminator=" ".join(discriminators) or None,
        trace=tuple(line for result in item.deciding for line in trace_lines(result)),
    )


def _missing_for(item: MechanismAssessment, evaluation: Evaluation) -> list[str]:
    missing: dict[str, None] = {}
    for result in evaluation.results:
        outcome = getattr(result.outcome, "mechanism", None)
        if outcome is item.mechanism and not result.shadow:
            missing.update(dict.fromkeys(result.undecided))
    return list(missing)


def _status(pattern: str, requested: list[str]) -> str:
    if pattern == "not-classifiable":
        return "data-required"
    return "data-requested" if requested else "success"


def assess(
    intake: Intake,
    *,
    ruleset: RuleSet,
    settings: Settings,
    now: datetime | None = None,
    decision_id: str | None = None,
) -> Assessment:
    """Assess one patient's data: every gas's physiology, the index gas's verdict."""
    now = now or datetime.now(UTC)
    pairing = pair_gases(
        intake,
        window=timedelta(minutes=settings.pairing_window_minutes),
        same_sample=timedelta(minutes=settings.same_sample_minutes),
    )
    gases = [
        derive_gas_facts(g, patient=intake.patient, settings=settings, today=now.date())
        for g in pairing.gases
    ]
    index = gases[0]
    compared = add_serial_facts(index, gases[1:])
    raw = {**index.facts, **_specimen_flags(pairing)}
    facts, findings = _checked_facts(raw, ruleset, index)
    evaluation = evaluate(ruleset, facts)
    verdict = evaluation.verdict
    intake_findings = [
        Finding(i.code, i.severity.value, i.message, expression=i.expression) for i in intake.issues
    ]
    rule_findings = [
        Finding(f.code.value, f.severity.value, f.rationale, rule=f.rule) for f in verdict.findings
    ]
    physiology = [
        Finding("value-out-of-range", "warning", problem) for g in gases for problem in g.problems
    ]
    all_findings = rule_findings + findings + physiology + intake_findings
    # Errors first, then warnings, then information; stable within each.
    order = {"error": 0, "warning": 1, "information": 2}
    all_findings.sort(key=lambda f: order[f.severity])
    requested = [r.fact for r in verdict.data_requested]
    return Assessment(
        decision_id=decision_id or str(uuid.uuid4()),
        timestamp=now,
        ruleset_identity=ruleset.identity,
        ruleset_hash=ruleset.content_hash,
        patient=intake.patient,
        pattern=verdict.pattern.value,
        hypoxaemia=verdict.hypoxaemia.value,
        mechanisms=[_mechanism(item, evaluation) for item in verdict.mechanisms],
        findings=all_findings,
        index=index,
        gases=[
            GasResult(facts=g, index=i == 0, compared_with=compared if i == 0 else None)
            for i, g in enumerate(gases)
            if g.gas.anchor is not None and g.gas.anchor.quantity is Quantity.ARTERIAL_PO2
        ],
        data_requested=requested,
        status=_status(verdict.pattern.value, requested),
        evaluation=evaluation,
    )
