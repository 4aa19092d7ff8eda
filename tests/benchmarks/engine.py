"""Timing of `evaluate`, run as a command: `python -m tests.benchmarks.engine`.

Absolute times depend on the machine, so the figure to watch is the ratio against a
baseline measured in the same run: evaluating an empty rule set (manifest only) over the
same facts, which costs the fact check and assembling an empty verdict. The default
workload is a generated rule set of 40 rules over the default catalogue; `--rules DIR`
times a rule-set directory instead. This is a developer tool, not a test: timing checks
in a test suite fail on slow machines and prove nothing on fast ones.
"""

import argparse
import sys
import timeit
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import yaml

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine.evaluate import evaluate
from service.engine.facts import FactValue
from service.engine.loader import build_ruleset, load_ruleset
from service.engine.ruleset import RuleSet
from service.engine.vocabulary import FindingCode, Mechanism, Severity

__all__ = ["BENCH_FACTS", "generated_documents", "main", "time_call"]

BENCH_FACTS: dict[str, FactValue] = {
    "arterial_po2": 58.0,
    "arterial_pco2": 49.5,
    "arterial_ph": 7.33,
    "arterial_hco3": 26.1,
    "arterial_so2": 89.0,
    "spo2": 91.0,
    "fio2": 0.35,
    "haemoglobin": 13.2,
    "age": 61.0,
    "barometric_pressure": 747.0,
    "inspired_po2": 245.0,
    "alveolar_po2": 183.0,
    "aa_gradient": 125.0,
    "aa_gradient_upper_limit": 23.0,
    "aa_gradient_excess": 102.0,
    "pf_ratio": 166.0,
    "shunt_fraction": 21.0,
    "spo2_sao2_difference": 2.0,
    "oxygen_device": "venturi-mask",
    "arterial_gas_present": True,
    "fio2_estimated_from_flow": False,
    "on_supplemental_oxygen": True,
}

_MANIFEST: dict[str, Any] = {
    "id": "bench-generated",
    "version": "1.0.0",
    "title": "Generated benchmark rule set",
    "description": "Forty generated rules over the default catalogue.",
    "parameters": {
        "pressure_threshold": {
            "value": 60,
            "unit": "mm[Hg]",
            "description": "A generated threshold.",
            "minimum": 20,
            "maximum": 200,
            "source": "Generated.",
        }
    },
    "blocks": {
        "raised_gradient": {"fact": "aa_gradient_excess", "gt": 0, "unit": "mm[Hg]"},
        "on_oxygen": {"fact": "on_supplemental_oxygen", "is": True},
    },
}

# (fact, unit, low, high) triples the generated leaves draw from.
_QUANTITIES = (
    ("arterial_po2", "mm[Hg]", 40, 100),
    ("arterial_pco2", "mm[Hg]", 30, 60),
    ("fio2", "1", 0.21, 0.8),
    ("pf_ratio", "mm[Hg]", 100, 400),
    ("shunt_fraction", "%", 5, 30),
    ("aa_gradient", "mm[Hg]", 10, 80),
    ("dlco_percent_predicted", "%", 40, 80),
    ("mixed_venous_so2", "%", 55, 75),
)


def _leaf(number: int) -> dict[str, Any]:
    fact, unit, low, high = _QUANTITIES[number % len(_QUANTITIES)]
    threshold = round(low + (high - low) * ((number * 7) % 10) / 10, 2)
    operator = ("gt", "lt", "ge", "le")[number % 4]
    return {"fact": fact, operator: threshold, "unit": unit}


def _rule(number: int) -> dict[str, Any]:
    mechanisms = list(Mechanism)
    findings = list(FindingCode)
    when: dict[str, Any] = {
        "all": [
            {"ref": "raised_gradient"} if number % 3 else {"ref": "on_oxygen"},
            _leaf(number),
            {"any": [_leaf(number + 1), {"not": _leaf(number + 2)}]},
        ]
    }
    rule: dict[str, Any] = {
        "id": f"generated-{number:02d}",
        "version": "1.0.0",
        "title": f"Generated rule {number}",
        "status": "active",
        "description": "Generated for timing.",
        "references": ["Generated."],
        "when": when,
        "rationale": "PaO2 {arterial_po2}, A-a gradient {aa_gradient}, FiO2 {fio2}.",
    }
    if number < 25:
        mechanism = mechanisms[number % len(mechanisms)]
        grade = ("likely", "unlikely")[number // len(mechanisms) % 2]
        rule["outcome"] = {
            "mechanism": {"code": mechanism.value, "grade": grade},
            "priority": number,
        }
    else:
        code = findings[number % len(findings)]
        severity = (Severity.WARNING, Severity.INFORMATION)[number % 2]
        rule["outcome"] = {"finding": {"code": code.value, "severity": severity.value}}
    return rule


def generated_documents(count: int = 40) -> dict[str, bytes]:
    """A rule set of `count` generated rules, as file contents keyed by relative path."""
    documents = {"ruleset.yaml": yaml.safe_dump(_MANIFEST).encode()}
    for number in range(count):
        rule = _rule(number)
        documents[f"{rule['id']}.yaml"] = yaml.safe_dump(rule).encode()
    return documents


def time_call(call: Callable[[], object], iterations: int) -> float:
    """Best-of-five mean time of one call, in microseconds."""
    runs = timeit.Timer(call).repeat(repeat=5, number=iterations)
    return min(runs) / iterations * 1e6


def _read_everything(ruleset: RuleSet) -> None:
    evaluation = evaluate(ruleset, BENCH_FACTS)
    for result in evaluation.results:
        _ = result.trace, result.rationale


def main(argv: Sequence[str] | None = None) -> int:
    """Print evaluate() timings and their ratio to an empty rule set's."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0] if __doc__ else None)
    parser.add_argument("--rules", type=Path, help="rule-set directory (default: generated)")
    parser.add_argument("--iterations", type=int, default=2000)
    options = parser.parse_args(argv)
    if options.rules is not None:
        ruleset = load_ruleset(options.rules, catalogue=DEFAULT_CATALOGUE)
    else:
        ruleset = build_ruleset(generated_documents(), catalogue=DEFAULT_CATALOGUE)
    empty = build_ruleset(
        {"ruleset.yaml": yaml.safe_dump(_MANIFEST).encode()}, catalogue=DEFAULT_CATALOGUE
    )
    facts = {name: value for name, value in BENCH_FACTS.items() if name in ruleset.catalogue}
    baseline = time_call(lambda: evaluate(empty, facts), options.iterations)
    measured = time_call(lambda: evaluate(ruleset, facts), options.iterations)
    everything = time_call(lambda: _read_everything(ruleset), options.iterations)
    sys.stdout.write(
        f"rule set {ruleset.identity}: {len(ruleset.evaluated)} evaluated rules, "
        f"{len(ruleset.leaves)} distinct leaves\n"
        f"empty rule set (baseline): {baseline:8.1f} us\n"
        f"evaluate:                  {measured:8.1f} us\n"
        f"evaluate + every trace and rationale: {everything:8.1f} us\n"
        f"ratio evaluate / baseline: {measured / baseline:.1f}\n"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
