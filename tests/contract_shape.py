"""The result's shape (README, What it answers), checked by the project's own tests.

A small independent reading of the result's documented shape, so the suite stands on its own:
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
GAS_EXCHANGE = {"defect", "normal", "unknown"}
GAS_EXCHANGE_MECHANISMS = {"diffusion-limitation", "vq-mismatch", "shunt"}
PATTERNS = {"no-hypoxaemia", "single", "mixed", "indeterminate", "not-classifiable"}
STATUSES = {"success", "data-requested", "data-required", "failure"}
PRESSURES = {
    "barometric-pressure",
    "water-vapour-pressure",
    "inspired-po2",
    "alveolar-po2",
    "aa-gradient",
    "aa-gradient-upper-limit",
    "room-air-alveolar-po2",
    "room-air-pao2",
    "room-air-pao2-least",
    "room-air-pao2-most",
    "pao2-expected",
    "pao2-lower-limit",
    "paco2-upper-limit",
    "pf-ratio",
    "imputed-pao2",
}
# The parts of a `deficit` parameter that are pressures (all of them but these).
DEFICIT_NOT_PRESSURES = {
    "observation",
    "index",
    "not-computed",
    "altitude-residence",
    "assumption",
    "pao2-basis",
    "method",
}
UNITS = {
    "fio2": {"1"},
    "a-a-ratio": {"1"},
    # SpO2 in % over FiO2 as a fraction: the number (e.g. 405) is in UCUM %, not 1 (UCUM
    # `1` would make it 405, not 4.05).
    "sf-ratio": {"%"},
    "arterial-o2-content": {"mL/dL"},
    "shunt-fraction": {"%"},
    "venous-admixture": {"%"},
    "shunt-dissolved-bound": {"%"},
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
    # docs/clinical-logic.md (rule set 2.0): `single` is one likely mechanism that explains the
    # deficit with normal gas exchange (or is itself the gas-exchange defect); `mixed` is two
    # likely, or one likely beside a gas-exchange defect whose type is open (or not judged).
    exchange = top.get("gas-exchange", [{}])[0].get("valueCode")
    if exchange not in GAS_EXCHANGE:
        problems.append(f"gas-exchange {exchange}")
    alone = len(likely) == 1 and (likely[0] in GAS_EXCHANGE_MECHANISMS or exchange == "normal")
    if pattern == "single" and not alone:
        problems.append(f"pattern single with {likely} likely, gas exchange {exchange}")
    if pattern == "mixed" and (not likely or alone):
        problems.append(f"mixed with {likely} likely, gas exchange {exchange}")
    if pattern in ("indeterminate", "not-classifiable", "no-hypoxaemia") and likely:
        problems.append(f"{pattern} with likely mechanisms")
    severities = [_value(_parts(f).get("severity")) for f in top.get("finding", [])]
    if "error" in severities and pattern != "not-classifiable":
        problems.append("error finding without not-classifiable")
    return problems


def _quantities(top: dict[str, list[dict[str, Any]]]) -> list[str]:
    names = PRESSURES | set(UNITS)
    # (where, name, allowed unit codes, parameter)
    found = [
        (name, name, _allowed(name), p) for name, ps in top.items() for p in ps if name in names
    ]
    for gas in top.get("gas", []):
        found += [
            (p["name"], p["name"], _allowed(p["name"]), p)
            for p in gas["part"]
            if p["name"] in names
        ]
    for deficit in top.get("deficit", []):
        found += [
            (f"deficit {p['name']}", p["name"], {"mm[Hg]", "kPa"}, p)
            for p in deficit["part"]
            if p["name"] not in DEFICIT_NOT_PRESSURES
        ]
    problems = []
    for where, _, allowed, p in found:
        q = p.get("valueQuantity")
        if q is None:
            problems.append(f"{where} is not a quantity")
            continue
        if q["code"] not in allowed or q.get("system") != "http://unitsofmeasure.org":
            problems.append(f"{where} in {q['code']}")
        value = q["value"]
        if isinstance(value, float) and len(repr(value).split(".")[-1]) > 6:
            problems.append(f"{where} has spurious precision {value!r}")
    return problems


def _allowed(name: str) -> set[str]:
    return {"mm[Hg]", "kPa"} if name in PRESSURES else UNITS[name]
