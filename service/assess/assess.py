"""The main job, in process: an ``Intake`` and a loaded rule set in, an ``Assessment`` out.

Pure apart from the clock and the decision id, both injectable: pairing, physiology and the
rule engine, glued together. Every arterial gas gets its derived values; the latest (the
index gas) is evaluated by the rules, with earlier gases on a different FiO2 supplying the
response to oxygen.
"""

from __future__ import annotations

import uuid
from collections.abc import Sequence
from dataclasses import replace
from datetime import UTC, datetime, timedelta

from service.config import Settings
from service.engine import Evaluation, FactError, Grade, RuleSet, evaluate
from service.engine.leaves import Leaf
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


def _evaluate(
    facts: dict[str, FactValue], ruleset: RuleSet, gas: GasFacts
) -> tuple[Evaluation, list[Finding]]:
    """Evaluate; facts the catalogue refuses are dropped and reported, never passed on."""
    known = {name: value for name, value in facts.items() if name in ruleset.catalogue}
    try:
        return evaluate(ruleset, known), []
    except FactError as error:
        refused = {problem.fact: problem.message for problem in error.problems}
    subject = gas.gas.anchor.source if gas.gas.anchor else None
    findings = [
        Finding("value-out-of-range", "warning", f"{name} was not used: {why}", subject=subject)
        for name, why in refused.items()
    ]
    kept = {name: value for name, value in known.items() if name not in refused}
    return evaluate(ruleset, kept), findings


_SYMBOL = {"lt": "<", "le": "≤", "gt": ">", "ge": "≥", "eq": "=", "is": "is", "in": "in"}
_STATE = {True: "true", False: "false", None: "unknown"}


def _number(value: object) -> str:
    return f"{value:.4g}" if isinstance(value, float) else str(value).lower()


def _leaf_text(leaf: Leaf) -> tuple[str, str]:
    """The fixed parts of a leaf's trace line: (unit shown after the value, the test)."""
    unit = f" {leaf.unit}" if leaf.unit not in (None, "1") else ""
    if leaf.operator.value == "present":
        return unit, f"present is {_number(leaf.threshold)}"
    threshold = leaf.threshold
    shown = (
        "–".join(_number(t) for t in threshold)
        if isinstance(threshold, tuple | list)
        else _number(threshold)
    )
    named = f" ({', '.join(leaf.parameters)})" if leaf.parameters else ""
    symbol = _SYMBOL.get(leaf.operator.value, leaf.operator.value)
    return unit, f"{symbol} {shown}{unit}{named}"


# The fixed text of every leaf of a rule set, built once per rule set (keyed by its leaves
# tuple, which is kept alive here so the id cannot be reused while cached).
_LEAF_TEXTS: dict[int, tuple[Sequence[Leaf], list[tuple[str, str]]]] = {}


def _leaf_texts(leaves: Sequence[Leaf]) -> list[tuple[str, str]]:
    found = _LEAF_TEXTS.get(id(leaves))
    if found is None or found[0] is not leaves:
        if len(_LEAF_TEXTS) > 8:  # a few rule sets per process at most (reloads)
            _LEAF_TEXTS.clear()
        found = _LEAF_TEXTS[id(leaves)] = (leaves, [_leaf_text(leaf) for leaf in leaves])
    return found[1]


def trace_lines(result: RuleResult) -> tuple[str, ...]:
    """One line per condition of a rule: ``id@version: fact value op threshold → state``.

    Built from the evaluation's state vector; the fixed text of each leaf is cached, since
    traces are part of every result.
    """
    context = result.context
    facts, states, leaves = context.facts, context.states, context.leaves
    ref = result.ref
    texts = _leaf_texts(leaves)
    lines = []
    for index in result.rule.condition.leaves:
        leaf = leaves[index]
        unit, test = texts[index]
        value = facts.get(leaf.fact)
        seen = "missing" if value is None else f"{_number(value)}{unit}"
        lines.append(f"{ref}: {leaf.fact} {seen} {test} → {_STATE[states[index]]}")
    return tuple(lines)


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


def _demote(m: MechanismVerdict, errors: list[str]) -> MechanismVerdict:
    if m.grade != "likely":
        return m
    reason = f"Demoted from likely to possible: the data are not trusted ({', '.join(errors)})."
    return replace(
        m,
        grade="possible",
        rationale=f"{m.rationale} {reason}",
        discriminator=DEMOTED_DISCRIMINATOR,
    )


def _missing_for(item: MechanismAssessment, evaluation: Evaluation) -> list[str]:
    missing: dict[str, None] = {}
    for result in evaluation.results:
        outcome = getattr(result.outcome, "mechanism", None)
        if outcome is item.mechanism and not result.shadow:
            missing.update(dict.fromkeys(result.undecided))
    return list(missing)


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
    add_serial_facts(index, gases[1:])
    raw = {**index.facts, **_specimen_flags(pairing)}
    evaluation, findings = _evaluate(raw, ruleset, index)
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
    all_findings = _merge(rule_findings, intake_findings) + findings + physiology
    # Errors first, then warnings, then information; stable within each.
    order = {"error": 0, "warning": 1, "information": 2}
    all_findings.sort(key=lambda f: order[f.severity])
    requested = [r.fact for r in verdict.data_requested]
    pattern = verdict.pattern.value
    mechanisms = [_mechanism(item, evaluation) for item in verdict.mechanisms]
    outside_errors = sorted(
        {f.code for f in findings + physiology + intake_findings if f.severity == "error"}
    )
    if outside_errors and pattern != "not-classifiable":
        # The engine judged the facts it was given; values refused before it (impossible
        # input) still make the data untrustworthy, so no grade may stay likely.
        pattern = "not-classifiable"
        mechanisms = [_demote(m, outside_errors) for m in mechanisms]
    return Assessment(
        decision_id=decision_id or str(uuid.uuid4()),
        timestamp=now,
        ruleset_identity=ruleset.identity,
        ruleset_hash=ruleset.content_hash,
        patient=intake.patient,
        pattern=pattern,
        hypoxaemia=verdict.hypoxaemia.value,
        mechanisms=mechanisms,
        findings=all_findings,
        index=index,
        gases=[
            GasResult(facts=g, index=i == 0)
            for i, g in enumerate(gases)
            if g.gas.anchor is not None and g.gas.anchor.quantity is Quantity.ARTERIAL_PO2
        ],
        data_requested=requested,
        status=_status(pattern, requested),
        evaluation=evaluation,
    )
