"""``oxyrule explain``: a readable account of how one Bundle was assessed.

In order: the verdict (pattern and why, each mechanism's grade and reason, the findings, what
would settle the open questions); the PaO2 deficit partition of each gas as a short table (the
expected PaO2, each part with its share, the fall); the inputs known only as a range and how
each grade depended on them; then what was read (each measurement, its source and any unit
conversion), what was derived (each number with its equation) and every rule with each
condition's value (true, false or unknown, and the fact that was missing).
"""

from __future__ import annotations

from typing import Any

from service.assess.partition import (
    PART_LABELS,
    PART_MEANINGS,
    GasPartitions,
    ShownPartition,
    assessment_partitions,
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
from service.engine import Evaluation, Grade, Truth
from service.engine.ruleset import GasExchangeOutcome, MechanismOutcome
from service.intake.model import Intake, Measurement
from service.physiology.oxygen_prediction import CAUTION as MODEL_CAUTION
from service.physiology.oxygenation_trend import OxygenationTrend
from service.physiology.titration import MeasuredKind
from service.physiology.units import kpa_from_mmhg

HELD = "the same grade at every end of the ranges"
_FITTED = frozenset(spec.name for spec in FITTED_FACTS)


def _measurement(m: Measurement) -> dict[str, Any]:
    item: dict[str, Any] = {
        "quantity": m.quantity.value,
        "value": m.value,
        "unit": m.unit,
        "time": m.time.isoformat() if m.time else None,
        "source": m.source.reference,
        "at": m.source.expression,
    }
    if m.sent_unit is not None:
        item["sent"] = {"value": m.sent_value, "unit": m.sent_unit}
    if m.specimen is not None:
        item["specimen"] = m.specimen.value
    return item


def _rules(evaluation: Evaluation) -> list[dict[str, Any]]:
    return [
        {
            "rule": r.ref,
            "title": r.rule.title,
            "state": r.state.value,
            "shadow": r.shadow,
            "conditions": list(r.trace_lines),
            "missing": list(r.undecided) if r.state is Truth.UNKNOWN else [],
            "rationale": r.rationale if r.state is Truth.TRUE else None,
        }
        for r in evaluation.results
    ]


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
    }


def _partition(gas: GasPartitions, shown: ShownPartition | None) -> dict[str, Any]:
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


def explain_json(intake: Intake, a: Assessment, *, settings: Settings) -> dict[str, Any]:
    """The explanation as plain data (for tools), the verdict first. ``settings`` are those
    ``a`` was assessed with."""
    evaluation = a.evaluation
    return {
        "verdict": _verdict(a),
        "partition": _partitions(a, settings),
        "uncertain_inputs": _uncertain(a),
        "oxygen_response": _response(a),
        "trend": _trend(a.trend),
        "ruleset": a.ruleset_identity,
        "ruleset_hash": a.ruleset_hash,
        "measurements": [_measurement(m) for m in intake.measurements],
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
        "rules": _rules(evaluation),
        "caution": CAUTION,
    }


def _fmt(value: object) -> str:
    return f"{value:.4g}" if isinstance(value, float) else str(value)


def _verdict_lines(v: dict[str, Any]) -> list[str]:
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
    if v["data_requested"]:
        out.append(f"  data requested: {', '.join(v['data_requested'])}")
    return out


def _share(share: float | None, value: float) -> str:
    if value < 0.0:
        return "raises"
    return "" if share is None else f"{share:.0%}"


def _partition_lines(partitions: list[dict[str, Any]]) -> list[str]:
    out = ["PaO2 deficit partition (mm[Hg]; a part > 0 lowers the PaO2, < 0 raises it)"]
    meanings: dict[str, str] = {}
    for p in partitions:
        gas = "index gas" if p["index"] else "earlier gas"
        where = f"{gas} {p['observation']}" if p["observation"] else gas
        if "not_computed" in p:
            out.append(f"  {where}: not computed ({p['not_computed']})")
            continue
        assumed = f", {p['assumption']}" if p["assumption"] else ""
        basis = " imputed from SpO2" if p["pao2_basis"] == "imputed-from-spo2" else ""
        out.append(f"  {where}{assumed}")
        out.append(f"    {'expected PaO2 for age (sea level, air)':<40} {p['expected_pao2']:>7.1f}")
        for part in p["parts"]:
            share = _share(part["share"], part["value"])
            out.append(f"    {part['label']:<40} {part['value']:>7.1f} {share:>7}")
            meanings.setdefault(part["label"], part["meaning"])
        out.append(
            f"    {'fall':<40} {p['fall']:>7.1f}    = {p['expected_pao2']:.1f} − PaO2{basis} "
            f"{p['pao2']:.1f}"
        )
    out += [f"  {label}: {meaning}" for label, meaning in meanings.items()]
    if meanings:
        out.append("  share: of everything that lowers the PaO2 (parts that raise it count 0)")
    return out


def _uncertain_lines(u: dict[str, Any]) -> list[str]:
    if not u["inputs"]:
        return ["Uncertain inputs: none (every input as sent)"]
    out = ["Uncertain inputs (known only as a range; assessed at each end)"]
    out += [f"  - {what}" for what in u["inputs"]]
    out.append("  how each grade depended on them:")
    for g in u["grades"]:
        out.append(f"    {g['mechanism']:<22} {g['grade']:<15} {g['how']}")
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


def explain_text(intake: Intake, a: Assessment, *, settings: Settings) -> str:
    """The explanation for a terminal, the verdict first."""
    data = explain_json(intake, a, settings=settings)
    out = _verdict_lines(data["verdict"])
    out += ["", *_partition_lines(data["partition"])]
    out += ["", *_uncertain_lines(data["uncertain_inputs"])]
    out += ["", *_response_lines(data["oxygen_response"])]
    out += ["", *_trend_lines(data["trend"])]
    out += ["", f"Rule set {data['ruleset']} (sha256 {data['ruleset_hash'][:16]}…)", "", "Read"]
    for m in data["measurements"]:
        sent = f"  (sent {_fmt(m['sent']['value'])} {m['sent']['unit']})" if "sent" in m else ""
        specimen = f" [{m['specimen']}]" if "specimen" in m else ""
        out.append(
            f"  {m['quantity']:<26} {_fmt(m['value']):>8} {m['unit']:<7}{specimen} "
            f"{m['time'] or 'no time'}  {m['source']}{sent}"
        )
    for issue in data["intake_issues"]:
        out.append(f"  ! {issue['severity']} {issue['code']}: {issue['message']} ({issue['at']})")
    out += [
        "",
        f"Index gas: {data['index_gas'] or 'none'}; barometric pressure "
        f"{data['barometric_pressure_source']}; FiO2 {data['fio2_source'] or 'unknown'}",
        "",
        "Derived",
    ]
    for name, d in data["derived"].items():
        out.append(f"  {name:<24} {_fmt(d['value']):>8} {d['unit']:<7} {d['method']}")
    out += ["", "Rules"]
    for r in data["rules"]:
        shadow = " (testing: reported only)" if r["shadow"] else ""
        out.append(f"  [{r['state']:<7}] {r['rule']} — {r['title']}{shadow}")
        out += [f"      {line.split(': ', 1)[1]}" for line in r["conditions"]]
        if r["missing"]:
            out.append(f"      missing: {', '.join(r['missing'])}")
    out += ["", CAUTION, ""]
    return "\n".join(out)
