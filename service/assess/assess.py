"""The main job, in process: an ``Intake`` and a loaded rule set in, an ``Assessment`` out.

Pure apart from the clock and the decision id, both injectable: pairing, physiology and the
rule engine, glued together. Every arterial gas gets its derived values; the latest (the
index gas) is evaluated by the rules, with earlier gases on a different FiO2 supplying the
response to oxygen. The engine decides everything about the verdict (grades, demotion on
untrusted data, the order of findings, what is missing, what to ask for); this module only
gathers the facts and the findings met before the rules, and maps the verdict to the
adapter-neutral ``Assessment``.
"""

from __future__ import annotations

import uuid
from dataclasses import replace
from datetime import UTC, datetime, timedelta

from service.config import Settings
from service.engine import Evaluation, Pattern, RuleSet, Severity, evaluate
from service.engine.verdict import SEVERITY_RANK, MechanismAssessment
from service.intake.model import Intake, Quantity, Specimen

from .derivation import FactValue
from .derive import derive_gas_facts
from .pairing import Pairing, pair_gases
from .result import Assessment, Finding, GasResult, MechanismVerdict, ResultStatus
from .serial import add_serial_facts

VALUE_OUT_OF_RANGE = "value-out-of-range"


def _specimen_flags(pairing: Pairing) -> dict[str, FactValue]:
    excluded = pairing.excluded_specimens
    unknown = any(m.specimen in (Specimen.UNKNOWN, None) for m in excluded)
    not_arterial = bool(pairing.non_arterial_po2) or any(
        m.specimen not in (Specimen.UNKNOWN, None) for m in excluded
    )
    return {"specimen_unknown": unknown, "specimen_not_arterial": not_arterial}


def _mechanism(item: MechanismAssessment) -> MechanismVerdict:
    discriminators = " ".join(d.text for d in item.discriminators)
    return MechanismVerdict(
        code=item.mechanism,
        grade=item.grade,
        rationale=" ".join(item.rationales),
        rules=item.rules,
        discriminator=discriminators or None,
        trace=tuple(line for result in item.deciding for line in result.trace_lines),
    )


def _merge(rule_findings: list[Finding], intake_findings: list[Finding]) -> list[Finding]:
    """Rule findings, with the location of an intake finding of the same code folded in;
    intake findings no rule restates are kept as they are."""
    located = {f.code: f.expression for f in intake_findings if f.expression}
    merged = [
        replace(f, expression=located[f.code]) if f.code in located and not f.expression else f
        for f in rule_findings
    ]
    stated = {f.code for f in rule_findings}
    return merged + [f for f in intake_findings if f.code not in stated]


def _status(evaluation: Evaluation) -> ResultStatus:
    verdict = evaluation.verdict
    if verdict.pattern is Pattern.NOT_CLASSIFIABLE:
        return ResultStatus.DATA_REQUIRED
    if verdict.data_requested:
        return ResultStatus.DATA_REQUESTED
    return ResultStatus.SUCCESS


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
    add_serial_facts(index, gases[1:])
    intake_findings = [
        Finding(i.code, Severity(i.severity.value), i.message, expression=i.expression)
        for i in intake.issues
    ]
    evaluation = evaluate(
        ruleset,
        {**index.facts, **_specimen_flags(pairing)},
        input_errors=[f.code for f in intake_findings if f.severity is Severity.ERROR],
    )
    verdict = evaluation.verdict
    rule_findings = [
        Finding(f.code.value, f.severity, f.rationale, rule=f.rule) for f in verdict.findings
    ]
    physiology = [
        Finding(VALUE_OUT_OF_RANGE, Severity.WARNING, problem)
        for g in gases
        for problem in g.problems
    ]
    findings = _merge(rule_findings, intake_findings) + physiology
    findings.sort(key=lambda f: SEVERITY_RANK[f.severity])  # stable: the engine's order within
    return Assessment(
        decision_id=decision_id or str(uuid.uuid4()),
        timestamp=now,
        ruleset_identity=ruleset.identity,
        ruleset_hash=ruleset.content_hash,
        patient=intake.patient,
        pattern=verdict.pattern,
        hypoxaemia=verdict.hypoxaemia,
        mechanisms=[_mechanism(item) for item in verdict.mechanisms],
        findings=findings,
        index=index,
        gases=[
            GasResult(facts=g, index=i == 0)
            for i, g in enumerate(gases)
            if g.gas.anchor is not None and g.gas.anchor.quantity is Quantity.ARTERIAL_PO2
        ],
        data_requested=[r.fact for r in verdict.data_requested],
        status=_status(evaluation),
        evaluation=evaluation,
    )
