"""Benchmark of the in-process assess path (a separate command, not a test).

    python -m tests.benchmarks.assess [--rounds N] [--bulk N]

Prints, measured in the same run on the same bytes: the median time of ``orjson.loads`` (the
floor), of the whole assess path (bytes → result bytes), and of full ``fhir.resources`` R4B
validation of the input (what strict mode adds), each as a ratio to the floor; then NDJSON bulk
throughput with 1 and 2 worker processes.
"""

from __future__ import annotations

import argparse
import statistics
import time
from collections.abc import Callable
from pathlib import Path

import orjson

from service.batch import assess_lines
from service.config import Settings
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


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=300)
    parser.add_argument("--bulk", type=int, default=3000)
    args = parser.parse_args()
    raw = orjson.dumps(orjson.loads(BUNDLE.read_bytes()))
    runtime = Runtime.load()

    def assess() -> bytes:
        return orjson.dumps(runtime.assess_bundle(orjson.loads(raw)))

    from fhir.resources.R4B.bundle import Bundle

    floor = median_us(lambda: orjson.loads(raw), args.rounds)
    whole = median_us(assess, args.rounds)
    strict = median_us(lambda: Bundle.model_validate_json(raw), max(args.rounds // 10, 20))
    print(f"input: {BUNDLE.name}, {len(raw)} bytes, {raw.count(b'resourceType')} resources")
    print(f"orjson.loads (floor)          {floor:9.1f} µs   1.0 ×")
    print(f"assess path, bytes → bytes    {whole:9.1f} µs  {whole / floor:5.1f} ×")
    print(f"R4B validation of the input   {strict:9.1f} µs  {strict / floor:5.1f} ×")

    lines = [(n, raw) for n in range(1, args.bulk + 1)]
    settings = Settings()
    for workers in (1, 2):
        start = time.perf_counter()
        count = sum(
            1 for _ in assess_lines(iter(lines), settings=settings, unit=None, workers=workers)
        )
        elapsed = time.perf_counter() - start
        rate = count / elapsed
        print(f"NDJSON, {workers} worker(s): {count} bundles in {elapsed:5.2f} s = {rate:7.0f} /s")


if __name__ == "__main__":
    main()
