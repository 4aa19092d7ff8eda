"""``oxyrule explain``: a readable account of how one Bundle was assessed.

What was read (each measurement, its source and any unit conversion), what was derived (each
number with its equation), every rule with each condition's value (true, false or unknown, and
the fact that was missing), and the verdict with what would settle the open questions.
"""

from __future__ import annotations

from typing import Any

from service.assess.result import CAUTION, Assessment
from service.engine import Evaluation, Truth
from service.intake.model import Intake, Measurement


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


def explain_json(intake: Intake, a: Assessment) -> dict[str, Any]:
    """The explanation as plain data (for tools)."""
    evaluation = a.evaluation
    return {
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
        "verdict": {
            "pattern": a.pattern,
            "hypoxaemia": a.hypoxaemia,
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
        },
        "caution": CAUTION,
    }


def _fmt(value: object) -> str:
    return f"{value:.4g}" if isinstance(value, float) else str(value)


def explain_text(intake: Intake, a: Assessment) -> str:
    """The explanation for a terminal."""
    data = explain_json(intake, a)
    out = [f"Rule set {data['ruleset']} (sha256 {data['ruleset_hash'][:16]}…)", "", "Read"]
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
    v = data["verdict"]
    out += ["", f"Verdict: {v['pattern']} (hypoxaemia {v['hypoxaemia']}, status {v['status']})"]
    for m in v["mechanisms"]:
        out.append(f"  {m['grade']:<15} {m['code']}: {m['rationale']}")
        if m["discriminator"]:
            out.append(f"  {'':<15} would settle it: {m['discriminator']}")
    for f in v["findings"]:
        out.append(f"  finding {f['severity']} {f['code']}: {f['message']}")
    if v["data_requested"]:
        out.append(f"  data requested: {', '.join(v['data_requested'])}")
    out += ["", CAUTION, ""]
    return "\n".join(out)
