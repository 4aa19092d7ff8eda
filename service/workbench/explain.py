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
from service.assess.result import CAUTION, Assessment, MechanismVerdict
from service.config import Settings
from service.engine import Evaluation, Grade, Truth
from service.intake.model import Intake, Measurement

HELD = "the same grade at every end of the ranges"


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


def explain_json(intake: Intake, a: Assessment, *, settings: Settings) -> dict[str, Any]:
    """The explanation as plain data (for tools), the verdict first. ``settings`` are those
    ``a`` was assessed with."""
    evaluation = a.evaluation
    return {
        "verdict": _verdict(a),
        "partition": _partitions(a, settings),
        "uncertain_inputs": _uncertain(a),
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


def explain_text(intake: Intake, a: Assessment, *, settings: Settings) -> str:
    """The explanation for a terminal, the verdict first."""
    data = explain_json(intake, a, settings=settings)
    out = _verdict_lines(data["verdict"])
    out += ["", *_partition_lines(data["partition"])]
    out += ["", *_uncertain_lines(data["uncertain_inputs"])]
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
