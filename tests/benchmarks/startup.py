"""Start-up of ``oxyrule assess`` on one file against a bare interpreter (a command, not a test).

    python -m tests.benchmarks.startup [--runs N]

Each run is a fresh process, so each pays the interpreter's start, the imports, loading and
checking the rule set, reading, assessing and rendering the demo Bundle, and writing the
answer. Measured in the same run and interleaved (so that whatever else the machine does weighs
on all alike):

* floor: ``python -c`` that imports orjson and parses the same file (an interpreter that does
  the least a JSON tool can do);
* ``oxyrule assess FILE`` (the CLI's module, ``python -m service.cli``, the same code the
  ``oxyrule`` script runs);
* ``python -c "import service.runtime"`` and the same with ``Runtime.load()``: how much of the
  start is importing and how much is loading the rule set.

Prints the median wall time and CPU time (user + system, of the child) of each and the ratio
to the floor; on a shared machine the CPU figures drift less.
"""

from __future__ import annotations

import argparse
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
BUNDLE = ROOT / "fixtures" / "demo" / "altitude-visitor.bundle.json"


def commands(file: Path) -> dict[str, list[str]]:
    python = sys.executable
    return {
        "floor: python, import orjson, parse": [
            python,
            "-c",
            f"import orjson; orjson.loads(open({str(file)!r}, 'rb').read())",
        ],
        "import service.runtime": [python, "-c", "import service.runtime"],
        "import it and Runtime.load()": [
            python,
            "-c",
            "from service.runtime import Runtime; Runtime.load()",
        ],
        "oxyrule assess FILE": [python, "-m", "service.cli", "assess", str(file)],
    }


def timed(command: list[str]) -> tuple[float, float]:
    """Wall and CPU seconds of one run of ``command`` (its output discarded)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    started = time.perf_counter()
    subprocess.run(command, cwd=ROOT, stdout=subprocess.DEVNULL, check=True, timeout=120)
    wall = time.perf_counter() - started
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=7, help="fresh processes per command")
    args = parser.parse_args()
    runs = min(max(args.runs, 1), 50)
    measured = commands(BUNDLE)
    walls: dict[str, list[float]] = {name: [] for name in measured}
    cpus: dict[str, list[float]] = {name: [] for name in measured}
    for command in measured.values():  # warm the file cache and the bytecode, not counted
        timed(command)
    for _ in range(runs):
        for name, command in measured.items():
            wall, cpu = timed(command)
            walls[name].append(wall)
            cpus[name].append(cpu)
    floor_wall = statistics.median(walls[next(iter(measured))])
    floor_cpu = statistics.median(cpus[next(iter(measured))])
    print(f"input: {BUNDLE.name}; {runs} fresh processes each, medians")
    print(f"{'command':<40} {'wall ms':>8} {'×':>6} {'cpu ms':>8} {'×':>6}")
    for name in measured:
        wall, cpu = statistics.median(walls[name]), statistics.median(cpus[name])
        print(
            f"{name:<40} {wall * 1000:8.0f} {wall / floor_wall:6.1f} "
            f"{cpu * 1000:8.0f} {cpu / floor_cpu:6.1f}"
        )


if __name__ == "__main__":
    main()
