"""The contract's result shape, checked by the project's own tests (contract.md §3).

A small independent reading of the contract so the suite stands without the shared checker:
names, codes, units, the pattern/grade consistency rules and the absence of nulls.
"""

from __future__ import annotations

from typing import Any

MECHANISMS = {
    "low-inspired-oxygen",
    "hypoventilation",
    "diffusion-limitation",
    "vq-mismatch",
    "shunt",
}
GRADES = {"likely", "possible", "unlikely", "not-assessable"}
GAS_EXCHANGE = {"diffusion-limitation", "vq-mismatch", "shunt"}
PATTERNS = {"no-hypoxaemia", "single", "mixed", "indeterminate", "not-classifiable"}
STATUSES = {"success", "data-requested", "data-required", "failure"}
PRESSURES = {
    "barometric-pressure",
    "water-vapour-pressure",
    "inspired-po2",
    "alveolar-po2",
    "aa-gradient",
    "aa-gradient-upper-limit",
    "pf-ratio",
    "imputed-pao2",
}
UNITS = {
    "fio2": {"1"},
    "a-a-ratio": {"1"},
    "sf-ratio": {"1"},
    "arterial-o2-content": {"mL/dL"},
    "shunt-fraction": {"%"},
    "expected-hco3": {"mmol/L"},
}


def _parts(parameter: dict[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for part in parameter.get("part", []):
        out.setdefault(part["name"], part)
    return out


def _value(part: dict[str, Any] | None) -> Any:
    if part is None:
        return None
    return next((v for k, v in part.items() if k.startswith("value")), None)


def contract_problems(result: dict[str, Any]) -> list[str]:
    """Every way ``result`` breaks the contract's shape (empty when it follows it)."""
    resources = [e["resource"] for e in result["entry"]]
    params = [r for r in resources if r["resourceType"] == "Parameters"]
    top: dict[str, list[dict[str, Any]]] = {}
    for p in params[0]["parameter"]:
        top.setdefault(p["name"], []).append(p)
    problems = _guidance(resources) + _verdict(top) + _quantities(top)
    if "null" in repr(result).replace("'null'", ""):
        problems.append("a null value")
    if not any(r["resourceType"] == "OperationOutcome" for r in resources):
        problems.append("no OperationOutcome")
    return problems


def _guidance(resources: list[dict[str, Any]]) -> list[str]:
    guidance = resources[0]
    problems = []
    if guidance["resourceType"] != "GuidanceResponse" or guidance["status"] not in STATUSES:
        problems.append("entry 0 must be a GuidanceResponse with a contract status")
    asks = guidance["status"] in ("data-requested", "data-required")
    if asks and not guidance.get("dataRequirement"):
        problems.append("data-requested/-required without dataRequirement")
    return problems


def _verdict(top: dict[str, list[dict[str, Any]]]) -> list[str]:
    problems = []
    pattern = top["pattern"][0]["valueCode"]
    if pattern not in PATTERNS:
        problems.append(f"pattern {pattern}")
    mechanisms = [_parts(m) for m in top["mechanism"]]
    grades = {_value(m.get("code")): _value(m.get("grade")) for m in mechanisms}
    if set(grades) != MECHANISMS or not set(grades.values()) <= GRADES:
        problems.append(f"mechanisms {grades}")
    problems += [
        "mechanism without rationale" for m in mechanisms if not _value(m.get("rationale"))
    ]
    problems += [
        "possible without discriminator"
        for m in mechanisms
        if _value(m.get("grade")) == "possible" and "discriminator" not in m
    ]
    likely = [c for c, g in grades.items() if g == "likely"]
    if pattern == "single" and len(likely) != 1:
        problems.append(f"pattern single with {len(likely)} likely")
    # Mixed: two likely causes, or one cause that leaves the A-a gradient normal (low
    # inspired oxygen, hypoventilation) beside a gas-exchange defect whose type is open
    # (docs/clinical-logic.md: one likely cause does not explain a raised A-a gradient).
    open_exchange = any(grades.get(c) == "possible" for c in GAS_EXCHANGE)
    if (
        pattern == "mixed"
        and len(likely) < 2
        and not (len(likely) == 1 and likely[0] not in GAS_EXCHANGE and open_exchange)
    ):
        problems.append("mixed without two likely, or one beside an open gas-exchange defect")
    if pattern in ("indeterminate", "not-classifiable", "no-hypoxaemia") and likely:
        problems.append(f"{pattern} with likely mechanisms")
    severities = [_value(_parts(f).get("severity")) for f in top.get("finding", [])]
    if "error" in severities and pattern != "not-classifiable":
        problems.append("error finding without not-classifiable")
    return problems


def _quantities(top: dict[str, list[dict[str, Any]]]) -> list[str]:
    names = PRESSURES | set(UNITS)
    quantities = [p for name, ps in top.items() for p in ps if name in names]
    for gas in top.get("gas", []):
        quantities += [p for p in gas["part"] if p["name"] in names]
    problems = []
    for q in quantities:
        code = q["valueQuantity"]["code"]
        allowed = {"mm[Hg]", "kPa"} if q["name"] in PRESSURES else UNITS[q["name"]]
        if code not in allowed:
            problems.append(f"{q['name']} in {code}")
        value = q["valueQuantity"]["value"]
        if isinstance(value, float) and len(repr(value).split(".")[-1]) > 6:
            problems.append(f"{q['name']} has spurious precision {value!r}")
    return problems
