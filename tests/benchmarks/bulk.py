"""Bulk assessment: gases per second and peak memory for each engine (a command, not a test).

    python -m tests.benchmarks.bulk [--observations 100000 1000000] [--runs local:1 ...]
                                    [--keep DIR] [--json FILE]

For each size, an invented export of about that many Observations (``oxyrule bulk synth``) is
written, and the same patients' gas episodes are written as NDJSON of Bundles, one per gas (not
timed). Then, each in a fresh process, in the same run:

* ``local:N``  — ``oxyrule bulk EXPORT OUT --workers N``
* ``spark:N``  — ``oxyrule bulk EXPORT OUT --engine spark --workers N`` (master ``local[N]``)
* ``assess:N`` — ``oxyrule assess episodes.ndjson --workers N``: the floor, the service's own
  path over the same gases, one Bundle each, with nothing to read, group or write as Parquet.

Each run's wall time gives gases/s; its peak memory is the largest sum of the resident sets of
the process and all its descendants (Spark's JVM and Python workers, the local pool), sampled
every 0.1 s from ``/proc``. Ratios are against ``assess`` with the same worker count. The
machine is shared: absolute figures drift, ratios less.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Iterator
from dataclasses import asdict, dataclass
from datetime import UTC, datetime
from pathlib import Path

import orjson

from service.bulk.episodes import cut_episodes, patient_data
from service.bulk.export import open_export
from service.bulk.patient import JobContext
from service.bulk.pseudonym import Pseudonymiser
from service.bulk.records import Record, read_file
from service.bulk.settings import BulkSettings
from service.bulk.synth import write_export
from service.config import Settings
from service.runtime import Runtime

OBSERVATIONS_PER_PATIENT = 44.8  # measured on synth exports (seed 1): about 9.0 per gas
RUN_LIMIT_S = 4 * 3600


@dataclass(frozen=True)
class Result:
    run: str
    observations: int
    gases: int
    seconds: float
    peak_mib: float

    @property
    def rate(self) -> float:
        return self.gases / self.seconds


def _children() -> dict[int, list[int]]:
    tree: dict[int, list[int]] = {}
    for entry in os.scandir("/proc"):
        if not entry.name.isdigit():
            continue
        try:
            stat = Path(entry.path, "stat").read_text()
        except OSError:
            continue
        ppid = int(stat.rsplit(")", 1)[1].split()[1])
        tree.setdefault(ppid, []).append(int(entry.name))
    return tree


def _tree_rss_kib(root: int) -> int:
    tree, total, todo = _children(), 0, [root]
    while todo:
        pid = todo.pop()
        todo += tree.get(pid, [])
        try:
            for line in Path(f"/proc/{pid}/status").read_text().splitlines():
                if line.startswith("VmRSS:"):
                    total += int(line.split()[1])
        except OSError:
            continue
    return total


def timed(command: list[str], stdout: Path | None = None) -> tuple[float, float, str]:
    """(seconds, peak MiB of the process tree, stdout text unless redirected)."""
    sink = stdout.open("wb") if stdout else subprocess.PIPE
    started = time.monotonic()
    process = subprocess.Popen(command, stdout=sink, stderr=subprocess.PIPE)
    peak = 0
    done = threading.Event()

    def sample() -> None:
        nonlocal peak
        while not done.is_set():
            peak = max(peak, _tree_rss_kib(process.pid))
            time.sleep(0.1)

    sampler = threading.Thread(target=sample, daemon=True)
    sampler.start()
    out, err = process.communicate(timeout=RUN_LIMIT_S)
    seconds = time.monotonic() - started
    done.set()
    sampler.join()
    if stdout:
        sink.close()  # type: ignore[union-attr]
    if process.returncode != 0:
        raise RuntimeError(f"{' '.join(command)} failed: {err.decode()[-2000:]}")
    return seconds, peak / 1024, (out or b"").decode()


def write_episodes(export: Path, path: Path) -> int:
    """The export's gas episodes as NDJSON of Bundles (grouped in memory by patient: this is
    set-up, not the thing measured); the number of Bundles."""
    settings = Settings()
    runtime = Runtime.load(settings)
    context = JobContext(
        settings, BulkSettings(), Pseudonymiser(), _now(), runtime.ruleset.content_hash
    )
    groups: dict[str, list[Record]] = {}
    locations: dict[str, dict[str, object]] = {}
    for file in open_export(str(export)).files:
        for item in read_file(file, max_line_bytes=1 << 22, pseudonym=Pseudonymiser()):
            if not isinstance(item, Record):
                continue
            if item.key is None:
                resource = orjson.loads(item.body)
                locations[f"Location/{resource['id']}"] = resource
            else:
                groups.setdefault(item.key, []).append(item)
    count = 0
    with path.open("wb") as out:
        for key in sorted(groups):
            data = patient_data(
                key,
                groups.pop(key),
                concept_map=runtime.concept_map,
                pseudonym=Pseudonymiser(),
                max_resources=10**7,
            )
            for episode in cut_episodes(
                data, windows=context.windows(runtime.ruleset), locations=locations
            ):
                out.write(orjson.dumps(episode.bundle) + b"\n")
                count += 1
    return count


def _now() -> datetime:
    return datetime.now(UTC)


def measure(size: int, runs: list[str], root: Path) -> Iterator[Result]:
    export = root / f"export-{size}"
    patients = max(1, round(size / OBSERVATIONS_PER_PATIENT))
    written = write_export(export, patients=patients, seed=1)
    episodes = root / f"episodes-{size}.ndjson"
    bundles = write_episodes(export, episodes)
    print(
        f"# {written.observations:,} Observations, {written.gases:,} gases written, "
        f"{bundles:,} assessable episodes, {patients:,} patients",
        flush=True,
    )
    cli = [sys.executable, "-m", "service.cli"]
    for name in runs:
        engine, workers = name.split(":")
        out = root / f"out-{size}-{engine}-{workers}"
        if engine == "assess":
            command = [*cli, "assess", str(episodes), "--workers", workers]
            seconds, peak, _ = timed(command, stdout=Path(os.devnull))
            gases = bundles
        else:
            command = [*cli, "bulk", str(export), str(out), "--workers", workers]
            if engine == "spark":
                command += ["--engine", "spark"]
            seconds, peak, text = timed(command)
            gases = int(text.split(" gases assessed")[0].rsplit(" ", 1)[1].replace(",", ""))
        result = Result(name, written.observations, gases, seconds, peak)
        print(
            f"{size:>9,} obs  {name:<9} {gases:>8,} gases  {seconds:8.1f} s  "
            f"{result.rate:8,.0f} gases/s  peak {peak:8,.0f} MiB",
            flush=True,
        )
        yield result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--observations", type=int, nargs="+", default=[100_000, 1_000_000])
    parser.add_argument(
        "--runs",
        nargs="+",
        default=["assess:1", "assess:2", "local:1", "local:2", "spark:1", "spark:2"],
    )
    parser.add_argument("--keep", type=Path, help="keep the exports and outputs here")
    parser.add_argument("--json", type=Path, help="also write the results as JSON")
    args = parser.parse_args()
    root = args.keep or Path(tempfile.mkdtemp(prefix="oxyrule-bulk-bench-"))
    root.mkdir(parents=True, exist_ok=True)
    results: list[Result] = []
    for size in args.observations:
        results += list(measure(size, args.runs, root))
    print("\nratio to `oxyrule assess` with the same workers (gases/s; > 1 is faster):")
    floors = {
        (r.observations, r.run.split(":")[1]): r.rate for r in results if r.run.startswith("assess")
    }
    for r in results:
        floor = floors.get((r.observations, r.run.split(":")[1]))
        if floor and not r.run.startswith("assess"):
            print(f"{r.observations:>9,} obs  {r.run:<9} {r.rate / floor:5.2f}×")
    if args.json:
        rows = [{**asdict(r), "gases_per_s": r.rate} for r in results]
        args.json.write_text(json.dumps(rows, indent=2) + "\n")
    if not args.keep:
        import shutil

        shutil.rmtree(root, ignore_errors=True)


if __name__ == "__main__":
    main()
