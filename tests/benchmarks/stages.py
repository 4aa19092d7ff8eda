"""Stage benchmark of the assess path (a separate command, not a test).

    python -m tests.benchmarks.stages [--rounds N] [--repeats N]

Prints, measured in the same run on the demo Bundle: the median time of ``orjson.loads`` (the
floor), of ``read_bundle`` on the parsed Bundle, and of ``evaluate`` (including ``decide``) on
the facts the assess path hands the engine for that Bundle, each as a ratio to the floor; then
the rest of the path, stage by stage: pairing, deriving every gas's facts, deriving the
index gas's facts again for each scenario of its uncertain inputs, the whole
assessment (which evaluates the rules once per scenario of its uncertain inputs), rendering
the result Bundle and ``orjson.dumps`` of it. Each figure is the median of ``--repeats``
interleaved runs of ``--rounds`` batches of 10.
"""

from __future__ import annotations

import argparse
import statistics
from collections.abc import Callable
from pathlib import Path

import orjson

from service.assess.assess import ALVEOLAR_TOLERANCE, windows
from service.assess.derive import derive_again, derive_gas_facts
from service.assess.pairing import pair_gases
from service.assess.uncertainty import input_ranges
from service.engine import evaluate
from service.engine.facts import FactValue
from service.fhir.extract import read_bundle
from service.runtime import Runtime
from tests.benchmarks.assess import median_us

BUNDLE = Path(__file__).resolve().parents[2] / "fixtures" / "demo" / "altitude-visitor.bundle.json"


def engine_facts(runtime: Runtime, data: object) -> dict[str, FactValue]:
    """The facts the assess path hands ``evaluate`` for ``data``: the index gas's facts,
    which the engine accepted (they are in its catalogue)."""
    assessment = runtime.assess_intake(read_bundle(data))
    catalogue = runtime.ruleset.catalogue
    return {k: v for k, v in assessment.index.facts.items() if k in catalogue}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=300, help="batches of 10 per run")
    parser.add_argument("--repeats", type=int, default=5, help="interleaved runs per stage")
    args = parser.parse_args()
    raw = orjson.dumps(orjson.loads(BUNDLE.read_bytes()))
    runtime = Runtime.load()
    data = orjson.loads(raw)
    facts = engine_facts(runtime, data)
    ruleset = runtime.ruleset
    concept_map = runtime.concept_map
    settings = runtime.settings
    intake = read_bundle(data, concept_map=concept_map)
    pairing = pair_gases(intake, windows=windows(settings))
    assessment = runtime.assess_intake(intake)
    result = runtime.render(assessment, addresses=intake.addresses)
    today = assessment.timestamp.date()

    def derive() -> object:
        return [
            derive_gas_facts(g, patient=intake.patient, settings=settings, today=today)
            for g in pairing.gases
        ]

    # The index gas's facts derived again for the representative inputs and each scenario of
    # its uncertain inputs, as the assessment asks for them (its per-gas cache emptied first,
    # so that each run derives them).
    index = assessment.index
    tolerance = ruleset.parameters.get(ALVEOLAR_TOLERANCE)
    ranges = input_ranges(
        index, tolerance_mmhg=tolerance.value if tolerance else 0.0, settings=settings
    )
    scenarios = [ranges.representative] if ranges.representative else []
    scenarios += [changes for _, changes, _ in ranges.scenarios]

    def again() -> object:
        index.again.clear()
        return [derive_again(index, changes, settings=settings) for changes in scenarios]

    stages: dict[str, Callable[[], object]] = {
        "orjson.loads (floor)": lambda: orjson.loads(raw),
        "read_bundle": lambda: read_bundle(data, concept_map=concept_map),
        "evaluate (with decide)": lambda: evaluate(ruleset, facts),
        "pair_gases": lambda: pair_gases(intake, windows=windows(settings)),
        "derive every gas": derive,
        "derive_again (scenarios)": again,
        "assess (all of it)": lambda: runtime.assess_intake(intake),
        "render": lambda: runtime.render(assessment, addresses=intake.addresses),
        "orjson.dumps (result)": lambda: orjson.dumps(result),
    }
    runs: dict[str, list[float]] = {name: [] for name in stages}
    for _ in range(args.repeats):
        for name, action in stages.items():
            runs[name].append(median_us(action, args.rounds))
    medians = {name: statistics.median(values) for name, values in runs.items()}
    floor = medians["orjson.loads (floor)"]
    print(
        f"input: {BUNDLE.name}, {len(raw)} bytes, {raw.count(b'resourceType')} resources; "
        f"{len(facts)} facts, {len(ruleset.evaluated)} rules, {len(ruleset.leaves)} leaves"
    )
    for name, value in medians.items():
        spread = f"{min(runs[name]):.1f}-{max(runs[name]):.1f}"
        print(f"{name:<24} {value:8.1f} µs  {value / floor:5.1f} ×   (runs {spread} µs)")


if __name__ == "__main__":
    main()
