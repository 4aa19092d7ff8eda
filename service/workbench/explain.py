"""``oxyrule explain``: a readable account of how one case was assessed.

The verdict first (pattern and why, each mechanism's grade and reason, the findings, what would
settle the open questions, telling data not sent from data to repeat); the site's overrides,
when a site file is in force; then the rules that decided, each condition as a tree (``all``,
``any``, ``not``, named blocks) with its value, and the rules that fired but were outranked;
the PaO2 deficit partition of each gas as a short table; the inputs known only as a range and
how each grade depended on them; the response to oxygen when the record holds a titration (its
points, the fit, how the rules used it, the predictions with their caution) and the trend over
three or more gases. The rest on request (``full``): what was read (each value as a
reader writes it, its source and what was sent), what was derived (each number with its
equation) and every rule's tree.

The text is a list of sections (``SECTIONS``, ``FULL_SECTIONS``), each a function of the
explanation's data: a new section slots in without touching the others. Pressures are shown in
the unit asked for (the engine renders the rationales in it); rule conditions keep the unit the
rule file is written in.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from service.assess.partition import (
    PART_LABELS,
    PART_MEANINGS,
    GasPartitions,
    ShownPartition,
    assessment_partitions,
)
from service.assess.presentation import (
    PressureUnit,
    pressure_label,
    pressure_text,
    quantity,
)
from service.assess.response_view import (
    FIO2_SOURCE_WORDS,
    KIND_WORDS,
    MODEL_WORDS,
    applicable_band,
    band_words,
    right_shift_mmhg,
)
from service.assess.result import CAUTION, Assessment, MechanismVerdict
from service.assess.titration import FITTED_FACTS, Bounds, Titration
from service.config import Settings
from service.engine import Evaluation, Grade, RuleResult, Truth
from service.engine.results import TraceNode
from service.engine.ruleset import GasExchangeOutcome, MechanismOutcome
from service.intake.model import Intake, Measurement
from service.physiology.oxygen_prediction import CAUTION as MODEL_CAUTION
from service.physiology.oxygenation_trend import OxygenationTrend
from service.physiology.titration import MeasuredKind
from service.physiology.units import kpa_from_mmhg
from service.site import SiteView

HELD = "the same grade at every end of the ranges"
MARK = {"true": "[true]   ", "false": "[false]  ", "unknown": "[unknown]"}
_FITTED = frozenset(spec.name for spec in FITTED_FACTS)


def _shown_value(value: float | str, unit: str, pressure_unit: PressureUnit) -> str:
    """A value read as a reader writes it: pressures in the unit asked for, fractions in %."""
    if isinstance(value, str):
        return value
    if unit == "mm[Hg]":
        return pressure_text(value, pressure_unit, 1 if abs(value) < 1000 else 0)
    if unit == "1":
        return f"{value * 100:.4g} %"
    return f"{value:.4g} {unit}".rstrip()


def _measurement(m: Measurement, pressure_unit: PressureUnit) -> dict[str, Any]:
    item: dict[str, Any] = {
        "quantity": m.quantity.value,
        "value": m.value,
        "unit": m.unit,
        "shown": _shown_value(m.value, m.unit, pressure_unit),
        "time": m.time.isoformat() if m.time else None,
        "source": m.source.reference,
        "at": m.source.expression,
    }
    if m.sent_unit is not None:
        item["sent"] = {"value": m.sent_value, "unit": m.sent_unit}
    if m.specimen is not None:
        item["specimen"] = m.specimen.value
    return item


def tree_json(node: TraceNode, blocks: dict[str, dict[str, Any]] | None = None) -> dict[str, Any]:
    """A condition tree as plain data: kind, state, a leaf's text and missing fact, children.

    With ``blocks``, a named block's parts are written there once (by name) rather than under
    every rule that uses it.
    """
    item: dict[str, Any] = {"kind": node.kind, "state": node.state.value}
    if node.name is not None:
        item["name"] = node.name
    if node.leaf is not None:
        item["text"] = node.text
        if node.leaf.missing is not None:
            item["missing"] = node.leaf.missing
    if node.kind == "ref" and blocks is not None and node.name is not None:
        if node.name not in blocks:
            blocks[node.name] = {}  # taken before its parts, which may refer to others
            blocks[node.name] = tree_json(node.children[0], blocks)
        return item
    if node.children:
        item["children"] = [tree_json(child, blocks) for child in node.children]
    return item


def _roles(a: Assessment) -> dict[str, str]:
    """What each rule did for the verdict: decides, outranked (fired, lost on priority)."""
    roles: dict[str, str] = {}
    for assessed in a.evaluation.verdict.mechanisms:
        for r in assessed.losing:
            roles[r.ref] = f"outranked for {assessed.mechanism.value}"
    for m in a.mechanisms:
        for ref in m.rules:
            roles[ref] = f"decides {m.code.value} {m.grade.value}"
    for f in a.findings:
        if f.rule:
            roles[f.rule] = f"raises finding {f.code}"
    verdict = a.evaluation.verdict
    for ref in verdict.hypoxaemia_rules:
        roles[ref] = f"decides hypoxaemia {verdict.hypoxaemia.value}"
    for ref in verdict.gas_exchange_rules:
        roles[ref] = f"decides gas exchange {verdict.gas_exchange.value}"
    return roles


def _rule(
    r: RuleResult, role: str | None, blocks: dict[str, dict[str, Any]] | None
) -> dict[str, Any]:
    return {
        "rule": r.ref,
        "title": r.rule.title,
        "state": r.state.value,
        "shadow": r.shadow,
        "role": role,
        "tree": tree_json(r.tree, blocks),
        "conditions": list(r.trace_lines),
        "missing": list(r.undecided) if r.state is Truth.UNKNOWN else [],
        "rationale": r.rationale if r.state is Truth.TRUE else None,
    }


def _rules(a: Assessment, blocks: dict[str, dict[str, Any]] | None) -> list[dict[str, Any]]:
    roles = _roles(a)
    return [_rule(r, roles.get(r.ref), blocks) for r in a.evaluation.results]


def _result_of(evaluation: Evaluation, ref: str) -> RuleResult | None:
    return next((r for r in evaluation.results if r.ref == ref), None)


def _deciding(a: Assessment, blocks: dict[str, dict[str, Any]] | None) -> list[dict[str, Any]]:
    """The rules behind each part of the verdict, each with its tree (as the inputs were sent)."""
    evaluation = a.evaluation
    verdict = evaluation.verdict
    wanted: list[tuple[str, str]] = [
        (f"{m.code.value} {m.grade.value}", ref) for m in a.mechanisms for ref in m.rules
    ]
    wanted += [(f"finding {f.code}", f.rule) for f in a.findings if f.rule]
    wanted += [(f"hypoxaemia {verdict.hypoxaemia.value}", r) for r in verdict.hypoxaemia_rules]
    wanted += [
        (f"gas exchange {verdict.gas_exchange.value}", r) for r in verdict.gas_exchange_rules
    ]
    out = []
    for what, ref in wanted:
        result = _result_of(evaluation, ref)
        if result is None:
            continue
        item: dict[str, Any] = {"for": what, "rule": ref, "state": result.state.value}
        item["tree"] = tree_json(result.tree, blocks)
        if result.state is not Truth.TRUE:
            item["note"] = (
                "decided at an end of the range of an uncertain input; as the inputs were "
                f"sent the rule is {result.state.value}"
            )
        out.append(item)
    return out


def _outranked(a: Assessment) -> list[dict[str, Any]]:
    out = []
    for m in a.evaluation.verdict.mechanisms:
        winners = [r.ref for r in m.deciding]
        for r in m.losing:
            outcome = r.rule.outcome
            assert isinstance(outcome, MechanismOutcome)
            best = m.deciding[0].rule.outcome if m.deciding else None
            out.append(
                {
                    "mechanism": m.mechanism.value,
                    "rule": r.ref,
                    "grade": outcome.grade.value,
                    "priority": outcome.priority,
                    "outranked_by": winners,
                    "winning_priority": best.priority
                    if isinstance(best, MechanismOutcome)
                    else None,
                }
            )
    return out


def _why(a: Assessment) -> str:
    """Why the pattern: the engine's reason when the verdict as sent is the one shown, else the
    likely mechanisms and the gas exchange that held across the uncertain inputs."""
    shown = a.evaluation.verdict
    likely = [m.code for m in a.mechanisms if m.grade is Grade.LIKELY]
    sent = [m.mechanism for m in shown.mechanisms if m.grade is Grade.LIKELY]
    if shown.pattern is a.pattern and sent == likely:
        return shown.pattern_reason
    return (
        f"across the ends of the uncertain inputs: likely {', '.join(likely) or 'none'}; "
        f"gas exchange {a.gas_exchange}"
    )


def _requested(a: Assessment) -> dict[str, list[str]]:
    """The data requested, split: facts not sent (or not derivable) and facts already known
    that a repeat would settle (after a change of FiO2, say)."""
    known = a.index.facts
    return {
        "not_sent": [f for f in a.data_requested if f not in known],
        "again": [f for f in a.data_requested if f in known],
    }


def _verdict(a: Assessment) -> dict[str, Any]:
    return {
        "pattern": a.pattern,
        "why": _why(a),
        "hypoxaemia": a.hypoxaemia,
        "gas_exchange": a.gas_exchange,
        "status": a.status,
        "mechanisms": [
            {
                "code": m.code,
                "grade": m.grade,
                "rationale": m.rationale,
                "rules": list(m.rules),
                "discriminator": m.discriminator,
            }
            for m in a.mechanisms
        ],
        "findings": [
            {"code": f.code, "severity": f.severity, "message": f.message, "rule": f.rule}
            for f in a.findings
        ],
        "data_requested": a.data_requested,
        "data_requested_split": _requested(a),
    }


def _partition(gas: GasPartitions, shown: ShownPartition | None) -> dict[str, Any]:
    """One partition in mm[Hg] (the text converts it when another unit is asked for)."""
    item: dict[str, Any] = {"observation": gas.reference, "index": gas.index}
    if shown is None:
        item["not_computed"] = gas.absent
        return item
    d = shown.partition
    item.update(
        assumption=shown.assumption,
        residence=shown.residence,
        pao2_basis="imputed-from-spo2" if shown.imputed else "measured",
        unit="mm[Hg]",
        expected_pao2=d.expected_pao2,
        lower_limit=shown.lower_limit_mmhg,
        pao2=d.arterial_po2,
        fall=d.fall,
        parts=[
            {
                "part": key,
                "label": PART_LABELS[key],
                "value": value,
                "share": shown.share(value),
                "meaning": PART_MEANINGS[key],
            }
            for key, value in shown.parts
        ],
        method=shown.method,
    )
    return item


def _partitions(a: Assessment, settings: Settings) -> list[dict[str, Any]]:
    return [
        _partition(gas, shown)
        for gas in assessment_partitions(a, settings)
        for shown in (gas.shown or (None,))
    ]


def _depends(m: MechanismVerdict) -> bool:
    # A grade that differed across the ends of the ranges is `possible` with no deciding rule
    # (``service.engine.scenarios``); its rationale says how it depended.
    return m.grade is Grade.POSSIBLE and not m.rules


def _uncertain(a: Assessment) -> dict[str, Any]:
    return {
        "inputs": list(a.uncertain_inputs),
        "grades": [
            {
                "mechanism": m.code,
                "grade": m.grade,
                "depends": _depends(m),
                "how": m.rationale if _depends(m) else HELD,
            }
            for m in a.mechanisms
        ]
        if a.uncertain_inputs
        else [],
    }


def _bounds(b: Bounds | None, low: float, high: float) -> dict[str, Any] | None:
    if b is None:
        return None
    return {
        "value": b.value,
        "low": low,
        "high": high,
        "least": b.least,
        "most": b.most,
        "widened_by": list(b.widened_by),
    }


def _fit_rules(a: Assessment) -> list[dict[str, Any]]:
    """Every rule that reads a fact of the fit: its state, what it decided (or which rules
    outranked it), its rationale."""
    deciding = {rule: m.code for m in a.mechanisms for rule in m.rules}
    by_mechanism = {m.code: m.rules for m in a.mechanisms}
    found = {f.rule for f in a.findings if f.rule}
    out = []
    for r in a.evaluation.results:
        if r.shadow or not any(leaf.fact in _FITTED for leaf in r.trace):
            continue
        outcome = r.rule.outcome
        decided: str | None = None
        outranked: list[str] = []
        if r.ref in deciding and isinstance(outcome, MechanismOutcome):
            decided = f"{outcome.mechanism}: {outcome.grade}"
        elif r.ref in found:
            decided = "a finding"
        elif isinstance(outcome, GasExchangeOutcome) and r.state is Truth.TRUE:
            decided = f"gas exchange: {outcome.status}"
        elif isinstance(outcome, MechanismOutcome) and r.state is Truth.TRUE:
            outranked = list(by_mechanism.get(outcome.mechanism, ()))
        out.append(
            {
                "rule": r.ref,
                "state": r.state.value,
                "decided": decided,
                "outranked_by": outranked,
                "rationale": r.rationale if r.state is Truth.TRUE else None,
            }
        )
    return out


def _response(a: Assessment) -> dict[str, Any] | None:
    t: Titration | None = a.titration
    if t is None:
        return None
    response, fit = t.response, t.fit
    two, one = response.two_parameter, response.effective_shunt
    points = [
        {
            "time": p.point.time.isoformat(),
            "observation": p.point.reference,
            "kind": p.point.kind.value,
            "value": p.point.value,
            "unit": "mm[Hg]" if p.point.kind is MeasuredKind.PAO2 else "1",
            "fio2": p.point.inspired.fio2,
            "fio2_range": [p.point.inspired.low, p.point.inspired.high],
            "fio2_source": p.point.inspired.source.value,
            "readings": p.point.readings,
            "used": p.used,
            "predicted": p.predicted,
            "standardised_residual": p.standardised_residual,
            "paco2": p.paco2_mmhg,
            "paco2_assumed": p.paco2_assumed,
            "note": p.note,
        }
        for p in (fit.points if fit is not None else ())
    ]
    prediction = t.prediction
    choice = applicable_band(a)
    c = response.conditions
    return {
        "model": fit.model.value if fit is not None else None,
        "model_label": MODEL_WORDS[fit.model] if fit is not None else None,
        "refusal": response.refusal,
        "points": points,
        "left_out": [
            {
                "time": d.time.isoformat(),
                "observation": d.reference,
                "kind": d.kind.value,
                "value": d.value,
                "fio2": d.fio2,
                "reason": d.reason,
            }
            for d in t.dropped
        ],
        "points_used": response.points_used,
        "fio2_levels": t.fio2_levels,
        "fio2_span": response.fio2_span,
        "shunt": _bounds(t.shunt, two.shunt.low, two.shunt.high) if two else None,
        "vq_term_mmhg": (
            _bounds(t.vq_drop, two.vq_drop_mmhg.low, two.vq_drop_mmhg.high) if two else None
        ),
        "vq_term_healthy_limit_mmhg": list(t.vq_drop_limit_mmhg),
        "right_shift_on_air_mmhg": right_shift_mmhg(t),
        "effective_shunt": _bounds(t.effective_shunt, one.shunt.low, one.shunt.high)
        if one
        else None,
        "chi_square": fit.chi_square if fit is not None else None,
        "degrees_of_freedom": fit.degrees_of_freedom if fit is not None else None,
        "fit_probability": fit.fit_probability if fit is not None else None,
        "vq_term_p_value": response.vq_term_p_value,
        "conditions": {
            "haemoglobin_g_dl": c.haemoglobin_g_dl,
            "haemoglobin_measured": c.haemoglobin_measured,
            "av_difference_ml_dl": c.av_difference_ml_dl,
            "av_difference_measured": c.av_difference_measured,
            "barometric_pressure_mmhg": c.barometric_mmhg,
            "prediction_paco2_mmhg": response.prediction_paco2_mmhg,
            "prediction_paco2_assumed": response.prediction_paco2_assumed,
        },
        "rules": _fit_rules(a),
        "predictions": [
            {
                "fio2": p.fio2,
                "spo2": p.saturation,
                "spo2_range": [p.saturation_low, p.saturation_high],
                "pao2": p.pao2_mmhg,
                "pao2_range": [p.pao2_low_mmhg, p.pao2_high_mmhg],
            }
            for p in (prediction.curve if prediction is not None else ())
        ],
        "band_choice": choice.reason,
        "targets": [
            {
                "band": band_words(x),
                "applies": None if choice.band is None else x.band is choice.band,
                "fio2": x.fio2,
                "fio2_range": [x.fio2_low, x.fio2_high],
                "fio2_ceiling": x.fio2_ceiling,
                "note": x.note,
            }
            for x in (prediction.targets if prediction is not None else ())
        ],
        "caution": MODEL_CAUTION,
    }


def _trend(trend: OxygenationTrend | None) -> dict[str, Any] | None:
    if trend is None:
        return None
    return {
        "direction": trend.direction.value,
        "note": trend.note,
        "fio2_range": trend.fio2_range,
        "measures": [
            {
                "measure": m.measure,
                "unit": m.unit,
                "direction": m.direction.value,
                "change": m.change,
                "threshold": m.threshold.source,
                "series": [[t.isoformat(), v] for t, v in m.series],
            }
            for m in trend.measures
        ],
    }


def explain_json(
    intake: Intake,
    a: Assessment,
    *,
    settings: Settings,
    site: SiteView | None = None,
    pressure_unit: PressureUnit | None = None,
    shared_blocks: bool = False,
) -> dict[str, Any]:
    """The explanation as plain data (for tools and the bench), the verdict first.

    ``settings`` are those ``a`` was assessed with, ``site`` what their site file changed, and
    ``pressure_unit`` the unit the rationales of ``a`` were rendered in (default: the site's).
    With ``shared_blocks`` each named block's tree is given once, under ``blocks``, and the
    rules' trees name it (``{"kind": "ref", "name": ...}``) instead of repeating it.
    """
    unit: PressureUnit = pressure_unit or settings.pressure_unit
    blocks: dict[str, dict[str, Any]] | None = {} if shared_blocks else None
    data = {
        "verdict": _verdict(a),
        "partition": _partitions(a, settings),
        "uncertain_inputs": _uncertain(a),
        "oxygen_response": _response(a),
        "trend": _trend(a.trend),
        "site": site.as_json() if site is not None else None,
        "pressure_unit": unit,
        "deciding": _deciding(a, blocks),
        "outranked": _outranked(a),
        "ruleset": a.ruleset_identity,
        "ruleset_hash": a.ruleset_hash,
        "measurements": [_measurement(m, unit) for m in intake.measurements],
        "intake_issues": [
            {"code": i.code, "severity": i.severity.value, "message": i.message, "at": i.expression}
            for i in intake.issues
        ],
        "index_gas": a.index.gas.anchor.source.reference if a.index.gas.anchor else None,
        "barometric_pressure_source": a.index.barometric_source,
        "fio2_source": a.index.fio2_source,
        "derived": {
            name: {
                "value": d.value,
                "unit": d.unit,
                "method": d.method,
                "from": [s.reference for s in d.inputs],
            }
            for name, d in a.index.derived.items()
        },
        "facts": dict(a.index.facts),
        "rules": _rules(a, blocks),
        "caution": CAUTION,
    }
    if blocks is not None:
        data["blocks"] = blocks
    return data


def _fmt(value: object) -> str:
    return f"{value:.4g}" if isinstance(value, float) else str(value)


Section = Callable[[dict[str, Any]], list[str]]


def _verdict_lines(data: dict[str, Any]) -> list[str]:
    v = data["verdict"]
    out = [
        f"Verdict: {v['pattern']} (hypoxaemia {v['hypoxaemia']}, gas exchange "
        f"{v['gas_exchange']}, status {v['status']})",
        f"  why: {v['why']}",
    ]
    for m in v["mechanisms"]:
        out.append(f"  {m['grade']:<15} {m['code']}: {m['rationale']}")
        if m["discriminator"]:
            out.append(f"  {'':<15} would settle it: {m['discriminator']}")
    for f in v["findings"]:
        out.append(f"  finding {f['severity']} {f['code']}: {f['message']}")
    split = v["data_requested_split"]
    if split["not_sent"]:
        out.append(f"  not sent, would settle an open question: {', '.join(split['not_sent'])}")
    if split["again"]:
        out.append(
            "  sent, and worth repeating (as the discriminators say): " + ", ".join(split["again"])
        )
    return out


def _site_lines(data: dict[str, Any]) -> list[str]:
    site = data["site"]
    if site is None:
        return []
    out = [f"Site file in force: {site['label']} ({site['file']})"]
    for p in site["parameters"]:
        unit = "" if p["unit"] == "1" else f" {p['unit']}"
        out.append(f"  parameter {p['name']}: {p['site']:g}{unit} (rule set: {p['rule_set']:g})")
    for name, value in site["settings"].items():
        out.append(f"  setting {name}: {value}")
    if not site["parameters"] and not site["settings"]:
        out.append("  (no parameter or setting changed)")
    return out


ALL_BLOCKS = 1_000


def _deciding_parts(node: dict[str, Any]) -> list[dict[str, Any]]:
    """The parts of an ``all`` or ``any`` that gave it its value: a false part of a false
    ``all``, a true part of a true ``any``, the unknown parts of an unknown one; every part of
    a true ``all`` or a false ``any`` (each one was needed)."""
    children: list[dict[str, Any]] = node.get("children", [])
    state, kind = node["state"], node["kind"]
    if (kind, state) in (("all", "true"), ("any", "false")) or kind not in ("all", "any"):
        return children
    return [c for c in children if c["state"] == state]


def tree_lines(
    node: dict[str, Any], depth: int = 0, *, blocks: int = ALL_BLOCKS, why: bool = False
) -> list[str]:
    """A condition tree as indented lines, each with its value in words (no colour needed).

    ``blocks`` is how many levels of named blocks are opened; deeper ones show as one line.
    With ``why``, only the parts that gave each node its value are shown (the others counted).
    """
    pad = "  " * depth
    mark = MARK[node["state"]]
    if node["kind"] == "leaf":
        missing = f"  (missing: {node['missing']})" if "missing" in node else ""
        return [f"{pad}{mark} {node['text']}{missing}"]
    if node["kind"] == "ref":
        head = f"{pad}{mark} block {node['name']}"
        if blocks <= 0:
            return [head + " (opened with --full)"]
        inner = tree_lines(node["children"][0], depth + 1, blocks=blocks - 1, why=why)
        return [head, *inner]
    words = {"all": "all of", "any": "any of", "not": "not", "definitely": "definitely"}
    children = node.get("children", [])
    shown = _deciding_parts(node) if why else children
    left = len(children) - len(shown)
    more = f"  ({left} other part{'s' if left != 1 else ''} {_OTHERS[node['state']]})"
    out = [f"{pad}{mark} {words.get(node['kind'], node['kind'])}" + (more if left else "")]
    for child in shown:
        out += tree_lines(child, depth + 1, blocks=blocks, why=why)
    return out


# What the parts a ``why`` tree leaves out were, by the value of their node.
_OTHERS = {"true": "false or unknown", "false": "true or unknown", "unknown": "decided"}


def _deciding_lines(data: dict[str, Any]) -> list[str]:
    out = ["Deciding rules (each condition with its value; blocks are named conditions)"]
    if not data["deciding"]:
        out.append("  none fired")
    for item in data["deciding"]:
        out.append(f"  {item['for']}  ←  {item['rule']}")
        if "note" in item:
            out.append(f"    ({item['note']})")
        out += tree_lines(item["tree"], 2, blocks=1, why=True)
    if data["outranked"]:
        out.append("  Fired but outranked (a rule of lower priority number decided):")
        for o in data["outranked"]:
            out.append(
                f"    {o['mechanism']}: {o['rule']} ({o['grade']}, priority {o['priority']}) "
                f"lost to {', '.join(o['outranked_by'])} (priority {o['winning_priority']})"
            )
    return out


def _share(share: float | None, value: float) -> str:
    if value < 0.0:
        return "raises"
    return "" if share is None else f"{share:.0%}"


def _pressure(value_mmhg: float, unit: PressureUnit) -> str:
    shown = quantity("", value_mmhg, "mm[Hg]", unit)["value"]
    return f"{shown:.{1 if unit == 'mm[Hg]' else 2}f}"


def _partition_lines(data: dict[str, Any]) -> list[str]:
    unit: PressureUnit = data["pressure_unit"]
    label = pressure_label(unit)
    out = [f"PaO2 deficit partition ({label}; a part > 0 lowers the PaO2, < 0 raises it)"]
    meanings: dict[str, str] = {}
    for p in data["partition"]:
        gas = "index gas" if p["index"] else "earlier gas"
        where = f"{gas} {p['observation']}" if p["observation"] else gas
        if "not_computed" in p:
            out.append(f"  {where}: not computed ({p['not_computed']})")
            continue
        assumed = f", {p['assumption']}" if p["assumption"] else ""
        basis = " imputed from SpO2" if p["pao2_basis"] == "imputed-from-spo2" else ""
        out.append(f"  {where}{assumed}")
        expected = _pressure(p["expected_pao2"], unit)
        out.append(f"    {'expected PaO2 for age (sea level, air)':<40} {expected:>7}")
        for part in p["parts"]:
            share = _share(part["share"], part["value"])
            out.append(f"    {part['label']:<40} {_pressure(part['value'], unit):>7} {share:>7}")
            meanings.setdefault(part["label"], part["meaning"])
        out.append(
            f"    {'fall':<40} {_pressure(p['fall'], unit):>7}    = {expected} − PaO2{basis} "
            f"{_pressure(p['pao2'], unit)}"
        )
    out += [f"  {label_}: {meaning}" for label_, meaning in meanings.items()]
    if meanings:
        out.append("  share: of everything that lowers the PaO2 (parts that raise it count 0)")
    return out


def _uncertain_lines(data: dict[str, Any]) -> list[str]:
    u = data["uncertain_inputs"]
    if not u["inputs"]:
        return ["Uncertain inputs: none (every input as sent)"]
    out = ["Uncertain inputs (known only as a range; assessed at each end)"]
    out += [f"  - {what}" for what in u["inputs"]]
    out.append("  how each grade depended on them:")
    for g in u["grades"]:
        out.append(f"    {g['mechanism']:<22} {g['grade']:<15} {g['how']}")
    return out


def _ruleset_lines(data: dict[str, Any]) -> list[str]:
    return [f"Rule set {data['ruleset']} (sha256 {data['ruleset_hash'][:16]}…)"]


def _read_lines(data: dict[str, Any]) -> list[str]:
    out = ["Read (each value as a reader writes it; what was sent when it was converted)"]
    for m in data["measurements"]:
        sent = ""
        if "sent" in m:  # said when the sender's writing differs from the one shown
            written = f"{_fmt(m['sent']['value'])} {m['sent']['unit']}"
            sent = "" if written == m["shown"] else f"  (sent {written})"
        specimen = f" [{m['specimen']}]" if "specimen" in m else ""
        out.append(
            f"  {m['quantity']:<26} {m['shown']:>12}{specimen} "
            f"{m['time'] or 'no time'}  {m['source']}{sent}"
        )
    for issue in data["intake_issues"]:
        out.append(f"  ! {issue['severity']} {issue['code']}: {issue['message']} ({issue['at']})")
    out += [
        "",
        f"Index gas: {data['index_gas'] or 'none'}; barometric pressure "
        f"{data['barometric_pressure_source']}; FiO2 {data['fio2_source'] or 'unknown'}",
    ]
    return out


def _derived_lines(data: dict[str, Any]) -> list[str]:
    out = ["Derived (canonical units, with the equation of each)"]
    for name, d in data["derived"].items():
        out.append(f"  {name:<24} {_fmt(d['value']):>8} {d['unit']:<7} {d['method']}")
    return out


def _all_rules_lines(data: dict[str, Any]) -> list[str]:
    out = ["Rules (every rule evaluated, with what it did for the verdict)"]
    for r in data["rules"]:
        shadow = " (testing: reported only)" if r["shadow"] else ""
        role = f" — {r['role']}" if r["role"] else ""
        out.append(f"  {MARK[r['state']]} {r['rule']}: {r['title']}{shadow}{role}")
        out += tree_lines(r["tree"], 3)
        if r["missing"]:
            out.append(f"      missing: {', '.join(r['missing'])}")
    return out


_SOURCES = {source.value: source for source in FIO2_SOURCE_WORDS}


def _value(kind: str, value: float) -> str:
    return f"{value:.0f} mmHg" if kind == "pao2" else f"{value:.0%}"


def _range(name: str, b: dict[str, Any] | None, scale: float, unit: str) -> str:
    if b is None:
        return ""
    widened = f" ({'; '.join(b['widened_by'])})" if b["widened_by"] else ""
    return (
        f"  {name} {b['value'] * scale:.1f}{unit}: 95 % range {b['low'] * scale:.1f}–"
        f"{b['high'] * scale:.1f}, with the assumptions {b['least'] * scale:.1f}–"
        f"{b['most'] * scale:.1f}{widened}"
    )


def _point_lines(r: dict[str, Any]) -> list[str]:
    out = ["  points (oldest first; residual in expected errors):"]
    for p in r["points"]:
        low, high = p["fio2_range"]
        fio2 = f"{p['fio2']:.2f}" + (f" ({low:.2f}–{high:.2f})" if high > low else "")
        source = FIO2_SOURCE_WORDS[_SOURCES[p["fio2_source"]]]
        kind = KIND_WORDS[MeasuredKind(p["kind"])]
        runs = f", {p['readings']} readings" if p["readings"] > 1 else ""
        used = "used" if p["used"] else f"not used: {p['note']}"
        paco2 = " (PaCO2 assumed)" if p["paco2_assumed"] else ""
        out.append(
            f"    {p['time']}  {kind} {_value(p['kind'], p['value']):>8} on FiO2 {fio2} "
            f"[{source}{runs}]  model {_value(p['kind'], p['predicted'])}, residual "
            f"{p['standardised_residual']:+.1f}; {used}{paco2}"
        )
    for d in r["left_out"]:
        fio2 = "unknown FiO2" if d["fio2"] is None else f"FiO2 {d['fio2']:.2f}"
        out.append(
            f"    {d['time']}  {KIND_WORDS[MeasuredKind(d['kind'])]} "
            f"{_value(d['kind'], d['value'])} on {fio2}: left out, {d['reason']}"
        )
    return out


def _rule_lines(rules: list[dict[str, Any]]) -> list[str]:
    out = ["  how the rules used it (rules that read the fit and fired):"]
    fired = [rule for rule in rules if rule["state"] == Truth.TRUE.value]
    for rule in fired:
        if rule["decided"]:
            decided = f"decided {rule['decided']}"
        elif rule["outranked_by"]:
            decided = "outranked by " + ", ".join(rule["outranked_by"])
        else:
            decided = "fired (context for another rule)"
        out.append(f"    {rule['rule']} — {decided}")
        if rule["rationale"] and rule["decided"]:
            out.append(f"      {rule['rationale']}")
    if len(fired) < len(rules):
        out.append(f"    ({len(rules) - len(fired)} more read it and did not fire: see Rules)")
    return out


def _response_lines(r: dict[str, Any] | None) -> list[str]:
    if r is None:
        return ["Response to oxygen: no titration (no points on two or more FiO2s)"]
    out = [
        f"Response to oxygen: {r['points_used']} points on {r['fio2_levels']} FiO2 levels, span "
        f"{r['fio2_span']:.2f}",
        *_point_lines(r),
    ]
    if r["model"] is None:
        return [*out, f"  nothing fitted: {r['refusal']}"]
    out.append(f"  model: {r['model_label']}")
    if r["refusal"]:
        out.append(f"  two-parameter fit refused: {r['refusal']}")
    for line in (
        _range("shunt", r["shunt"], 100.0, " %"),
        _range("V/Q term", r["vq_term_mmhg"], 1.0, " mmHg"),
        _range("effective shunt", r["effective_shunt"], 100.0, " %"),
    ):
        if line:
            out.append(line)
    if r["shunt"] is not None:
        low, high = r["vq_term_healthy_limit_mmhg"]
        limit = f"{high:.0f}" if low == high else f"{low:.0f}–{high:.0f} (age not known)"
        out.append(f"  healthy V/Q term for age up to {limit} mmHg")
        if r["right_shift_on_air_mmhg"] is not None:
            shift = r["right_shift_on_air_mmhg"]
            kpa = kpa_from_mmhg(shift)
            out.append(f"  right shift on air (PIO2 − Pc'O2): {shift:.0f} mmHg ({kpa:.1f} kPa)")
    probability = (
        "no spare points to test it"
        if r["fit_probability"] is None
        else f"probability {r['fit_probability']:.3g}"
    )
    out.append(
        f"  fit: chi-square {r['chi_square']:.2f} on {r['degrees_of_freedom']} degrees of "
        f"freedom, {probability}"
    )
    c = r["conditions"]
    out.append(
        f"  conditions: Hb {c['haemoglobin_g_dl']:g} g/dL "
        f"({'measured' if c['haemoglobin_measured'] else 'assumed'}), a-v difference "
        f"{c['av_difference_ml_dl']:.1f} mL/dL "
        f"({'measured' if c['av_difference_measured'] else 'assumed'}), PB "
        f"{c['barometric_pressure_mmhg']:.0f} mmHg"
    )
    out += _rule_lines(r["rules"])
    if r["predictions"]:
        out.append("  predicted (model estimate):")
        out.append("    FiO2  " + " ".join(f"{p['fio2']:>5.2f}" for p in r["predictions"]))
        out.append("    SpO2  " + " ".join(f"{p['spo2']:>5.0%}" for p in r["predictions"]))
        out.append("    PaO2  " + " ".join(f"{p['pao2']:>5.0f}" for p in r["predictions"]))
        out.append(f"  target band: {r['band_choice']}")
        for x in r["targets"]:
            applies = " (applies)" if x["applies"] else ""
            out.append(f"    {x['band']}{applies}: {x['note']}")
    out.append(f"  {r['caution']}")
    return out


def _trend_lines(t: dict[str, Any] | None) -> list[str]:
    if t is None:
        return ["Trend: fewer than three arterial gases"]
    out = [f"Trend over the gases: {t['direction']} ({t['note']})"]
    for m in t["measures"]:
        values = ", ".join(f"{v:.3g}" for _, v in m["series"]) or "none"
        out.append(f"  {m['measure']:<24} {m['direction']:<10} {values}  [{m['threshold']}]")
    return out


def _oxygen_lines(data: dict[str, Any]) -> list[str]:
    """The response to oxygen and the trend, when the record holds them."""
    out: list[str] = []
    if data["oxygen_response"] is not None:
        out += _response_lines(data["oxygen_response"])
    if data["trend"] is not None:
        out += ([""] if out else []) + _trend_lines(data["trend"])
    return out


SECTIONS: list[Section] = [
    _verdict_lines,
    _site_lines,
    _deciding_lines,
    _partition_lines,
    _uncertain_lines,
    _oxygen_lines,
    _ruleset_lines,
]
"""What ``explain`` shows, in order; a section with nothing to say returns no lines."""
FULL_SECTIONS: list[Section] = [_read_lines, _derived_lines, _all_rules_lines]
"""What ``explain --full`` adds after them."""


def explain_text(
    intake: Intake,
    a: Assessment,
    *,
    settings: Settings,
    site: SiteView | None = None,
    pressure_unit: PressureUnit | None = None,
    full: bool = False,
) -> str:
    """The explanation for a terminal: the verdict first, the rest with ``full``."""
    data = explain_json(intake, a, settings=settings, site=site, pressure_unit=pressure_unit)
    out: list[str] = []
    for section in SECTIONS + (FULL_SECTIONS if full else []):
        lines = section(data)
        if lines:
            out += [*lines, ""]
    if not full:
        out += [
            "(explain --full adds every value read, every derived value and every rule's tree)",
            "",
        ]
    out += [CAUTION, ""]
    return "\n".join(out)


__all__ = [
    "FULL_SECTIONS",
    "SECTIONS",
    "explain_json",
    "explain_text",
    "tree_json",
    "tree_lines",
]
