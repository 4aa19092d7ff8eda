"""Benchmark of the in-process assess path (a separate command, not a test).

    python -m tests.benchmarks.assess [--rounds N] [--bulk N] [--titration-only]

Prints, measured in the same run on the same bytes: the median time of ``orjson.loads`` (the
floor), of the whole assess path (bytes → result bytes), of the same as an HTTP request
computes it in its work thread (``service.api.answers.answer_bundle``: with the duplicate-key
check, the Parameters form and the tally), and of full ``fhir.resources`` R4B validation of
the input (what strict mode adds), each as a ratio to the floor; then NDJSON bulk throughput
with 1 and 2 worker processes (``oxyrule assess --ndjson``'s path), also as the cost of a line
against the floor.

Then what the oxygen-response fit adds: the assess path of each titration fixture (and of the
demo Bundle, which has no titration) with the titration as shipped and with it switched off
(``record_points``, ``assess_titration`` and the trend's fits replaced by a function that finds
none), in CPU time
of this process (steadier than wall time on a shared machine), the difference in µs and as a
ratio to the floor.
"""

from __future__ import annotations

import argparse
import statistics
import time
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path

import orjson

from service.batch import assess_lines
from service.config import ServerSettings, Settings
from service.intake.limits import ReadLimits
from service.runtime import Runtime

BUNDLE = Path(__file__).resolve().parents[2] / "fixtures" / "demo" / "altitude-visitor.bundle.json"


def median_us(
    action: Callable[[], object], rounds: int, clock: Callable[[], float] = time.perf_counter
) -> float:
    """Median time of ``action`` in microseconds (batches of 10 to beat timer noise): wall
    time by default, or another ``clock`` such as ``time.process_time`` (CPU time)."""
    for _ in range(max(rounds // 10, 5)):
        action()
    samples = []
    for _ in range(rounds):
        start = clock()
        for _ in range(10):
            action()
        samples.append((clock() - start) / 10 * 1e6)
    return statistics.median(samples)


def interleaved_us(
    actions: dict[str, Callable[[], object]],
    rounds: int,
    clock: Callable[[], float] = time.process_time,
) -> dict[str, float]:
    """Median time of each action in microseconds, their batches of 10 taken in turn (so a
    change in the machine's load falls on all of them alike), in CPU time of this process by
    default: on a shared machine wall time also counts the other processes' turns."""
    for action in actions.values():
        for _ in range(max(rounds // 10, 5)):
            action()
    samples: dict[str, list[float]] = {name: [] for name in actions}
    for _ in range(rounds):
        for name, action in actions.items():
            start = clock()
            for _ in range(10):
                action()
            samples[name].append((clock() - start) / 10 * 1e6)
    return {name: statistics.median(values) for name, values in samples.items()}


TITRATIONS = Path(__file__).resolve().parents[2] / "fixtures" / "cases" / "titration"


def _titration_alone(runtime: Runtime, data: object) -> Callable[[], object]:
    """``assess_titration`` on one Bundle's record, everything before it done once: the
    points, the fit, its predictions and its facts."""
    from service.assess.assess import titration_rules, windows
    from service.assess.derive import derive_gas_facts
    from service.assess.pairing import pair_gases
    from service.assess.titration import assess_titration
    from service.fhir.extract import read_bundle

    settings = runtime.settings
    intake = read_bundle(data)
    pairing = pair_gases(intake, windows=windows(settings))
    index = derive_gas_facts(
        pairing.index, patient=intake.patient, settings=settings, today=datetime.now(UTC).date()
    )
    rules = titration_rules(runtime.ruleset)

    def run() -> object:
        return assess_titration(
            intake,
            index=index.facts,
            index_time=index.gas.time,
            windows=windows(settings),
            settings=settings,
            rules=rules,
            by_quantity=pairing.by_quantity,
        )

    return run


def titration_costs(runtime: Runtime, rounds: int, floor: float) -> None:
    """The assess path of each titration fixture with and without the titration, and the
    titration alone (CPU time)."""
    import service.assess.assess as assess_module
    import service.assess.trend as trend_module

    def none(*_: object, **__: object) -> None:
        return None

    bundles = [BUNDLE, *sorted(TITRATIONS.glob("*.bundle.json"))]
    print("the oxygen-response fit in the assess path (CPU time; off = no titration computed;")
    print("alone = the points, fit, predictions and facts by themselves)")
    header = f"{'input':<34} {'with':>9} {'off':>9} {'adds':>9} {'× floor':>8}"
    print(f"{header} {'alone':>9} {'× floor':>8}")
    # Switched off: the record's points (sorted out once per assessment) and every fit.
    switched = (
        (assess_module, "record_points"),
        (assess_module, "assess_titration"),
        (trend_module, "assess_titration"),
    )
    shipped = [getattr(module, name) for module, name in switched]
    for path in bundles:
        raw = orjson.dumps(orjson.loads(path.read_bytes()))

        def run(raw: bytes = raw) -> bytes:
            return orjson.dumps(runtime.assess_bundle(orjson.loads(raw)))

        with_fit = median_us(run, rounds, time.process_time)
        for module, name in switched:
            setattr(module, name, none)
        try:
            without = median_us(run, rounds, time.process_time)
        finally:
            for (module, name), function in zip(switched, shipped, strict=True):
                setattr(module, name, function)
        added = with_fit - without
        alone = median_us(_titration_alone(runtime, orjson.loads(raw)), rounds, time.process_time)
        name = path.name.removesuffix(".bundle.json")
        print(
            f"{name:<34} {with_fit:7.0f}µs {without:7.0f}µs {added:+7.0f}µs {added / floor:7.1f}"
            f" {alone:7.0f}µs {alone / floor:7.1f}"
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=300)
    parser.add_argument(
        "--bulk", type=int, default=3000, help="NDJSON lines through the CLI path (0: skip it)"
    )
    parser.add_argument("--titration-only", action="store_true", help="only the fit's cost")
    args = parser.parse_args()
    raw = orjson.dumps(orjson.loads(BUNDLE.read_bytes()))
    runtime = Runtime.load()
    if args.titration_only:
        floor = median_us(lambda: orjson.loads(raw), args.rounds, time.process_time)
        print(f"orjson.loads of {BUNDLE.name} (floor, CPU)  {floor:7.1f} µs")
        titration_costs(runtime, max(args.rounds // 10, 20), floor)
        return

    def assess() -> bytes:
        return orjson.dumps(runtime.assess_bundle(orjson.loads(raw)))

    from service.api.answers import answer_bundle

    server = ServerSettings()
    limits = ReadLimits(server.max_bundle_entries, server.max_issues)

    def http_work() -> bytes:
        """What an HTTP request computes in its work thread (``answer_bundle``): besides the
        above, the duplicate-key check, the Parameters form and the tally for the metrics."""
        return answer_bundle(runtime, raw, None, limits).body

    from fhir.resources.R4B.bundle import Bundle

    times = interleaved_us(
        {"floor": lambda: orjson.loads(raw), "whole": assess, "answered": http_work}, args.rounds
    )
    floor, whole, answered = times["floor"], times["whole"], times["answered"]
    strict = median_us(
        lambda: Bundle.model_validate_json(raw), max(args.rounds // 10, 20), time.process_time
    )
    print(f"input: {BUNDLE.name}, {len(raw)} bytes, {raw.count(b'resourceType')} resources")
    print("(CPU time of this process, the first three taken in turn; medians of batches of 10)")
    print(f"orjson.loads (floor)          {floor:9.1f} µs   1.0 ×")
    print(f"assess path, bytes → bytes    {whole:9.1f} µs  {whole / floor:5.1f} ×")
    print(f"the same as HTTP computes it  {answered:9.1f} µs  {answered / floor:5.1f} ×")
    print(f"R4B validation of the input   {strict:9.1f} µs  {strict / floor:5.1f} ×")

    lines = [(n, raw) for n in range(1, args.bulk + 1)]
    settings = Settings()
    for workers in (1, 2) if lines else ():
        start = time.perf_counter()
        count = sum(
            1 for _ in assess_lines(iter(lines), settings=settings, unit=None, workers=workers)
        )
        elapsed = time.perf_counter() - start
        rate = count / elapsed
        ratio = elapsed / count * 1e6 / floor
        print(
            f"NDJSON, {workers} worker(s): {count} bundles in {elapsed:5.2f} s = {rate:7.0f} /s"
            f" ({ratio:5.1f} × orjson.loads a line)"
        )
    cpu_floor = median_us(lambda: orjson.loads(raw), args.rounds, time.process_time)
    print(f"orjson.loads (floor, CPU time) {cpu_floor:9.1f} µs")
    titration_costs(runtime, max(args.rounds // 10, 20), cpu_floor)


if __name__ == "__main__":
    main()
