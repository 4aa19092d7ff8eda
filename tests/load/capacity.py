"""Capacity of ``POST /fhir/$assess-hypoxaemia`` and a fixed-rate load below it (a command).

    python -m tests.load.capacity [--seconds 60] [--fraction 0.8] [--wrk-seconds 15]
                                  [--baseline-tree DIR [--rounds 2]]

1. Capacity: ``wrk`` (1 thread, 16 connections, as ``tests/benchmarks/http.py``) against one
   ``oxyrule serve`` worker with the demo Bundle: the most requests per second it answers.
   The bare FastAPI floor of ``tests/benchmarks/http.py`` is measured in the same run, as the
   baseline the service's figure is a share of.
2. Fixed rate: ``fraction`` of that capacity for ``seconds``, from an open-loop generator
   (``tests/load/common.py``): arrivals at a fixed rate whatever the answers do, latency
   measured from each request's scheduled send time, so queueing in the server is counted
   (wrk is closed-loop: a slow answer delays the next request and hides the queue). The run
   passes with zero errors; its p99 is stated. The same generator is first run against the
   floor at the same rate, to show the client keeps up (its dispatch lag is printed too).

3. With ``--baseline-tree`` (another checkout, e.g. ``git worktree add /tmp/before HEAD~1``):
   the same fixed-rate load, alternately against a server of that checkout and of this one,
   ``--rounds`` times each, at the rate found in 1; both are printed, as a before/after
   comparison measured in one run.

Loopback only; every run is bounded in time and stops by itself.
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from tests.benchmarks.http import FLOOR, with_wrk
from tests.load.common import (
    ASSESS,
    BUNDLE,
    HOST,
    ROOT,
    Request,
    Server,
    free_port,
    run_open_loop,
)

MAX_SECONDS = 120


def compare(baseline: Path, body: bytes, rate: int, seconds: float, rounds: int) -> None:
    """The fixed-rate load against the baseline checkout and this one, alternately."""
    headers = {"Content-Type": "application/fhir+json"}
    for n in range(rounds):
        for name, root in (("baseline", baseline.resolve()), ("this tree", ROOT)):
            with Server(root=root) as server:
                with_wrk_warm_up(server.url(ASSESS), body)
                run = run_open_loop(
                    server.port,
                    [Request("POST", ASSESS, headers, body)],
                    rate=rate,
                    seconds=seconds,
                )
            print(f"round {n + 1}, {name:<9} at {rate} req/s: {run.summary()}")


def with_wrk_warm_up(url: str, body: bytes) -> None:
    with tempfile.TemporaryDirectory() as work:
        body_file = Path(work) / "body.json"
        body_file.write_bytes(body)
        with_wrk(url, body_file, 16, 3)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=60.0, help="fixed-rate run (max 120)")
    parser.add_argument("--fraction", type=float, default=0.8, help="of the measured capacity")
    parser.add_argument("--wrk-seconds", type=float, default=15.0, help="capacity run (max 60)")
    parser.add_argument("--baseline-tree", type=Path, help="compare with this checkout")
    parser.add_argument("--rounds", type=int, default=2, help="of the comparison (max 5)")
    args = parser.parse_args()
    seconds = min(max(args.seconds, 1.0), MAX_SECONDS)
    wrk_seconds = min(max(args.wrk_seconds, 1.0), 60.0)
    if shutil.which("wrk") is None:
        raise SystemExit("capacity: wrk is not installed (apt-get install wrk)")
    body = BUNDLE.read_bytes()
    floor_port = free_port()
    floor = subprocess.Popen(
        [sys.executable, "-m", "tests.benchmarks.http", "--serve-floor", str(floor_port)],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        time.sleep(2)
        with Server() as server, tempfile.TemporaryDirectory() as work:
            body_file = Path(work) / "body.json"
            body_file.write_bytes(body)
            service_url, floor_url = server.url(ASSESS), f"http://{HOST}:{floor_port}{FLOOR}"
            for url in (floor_url, service_url):  # warm-up
                with_wrk(url, body_file, 16, 3)
            floor_run = with_wrk(floor_url, body_file, 16, wrk_seconds)
            service_run = with_wrk(service_url, body_file, 16, wrk_seconds)
            capacity = service_run.requests_per_second
            print(f"wrk -t1 -c16 -d{wrk_seconds:g}s, body {BUNDLE.name} ({len(body)} bytes)")
            print(
                f"  floor (bare FastAPI):   {floor_run.requests_per_second:8.0f} req/s, "
                f"p99 {floor_run.p99_ms:.2f} ms, errors {floor_run.errors}"
            )
            print(
                f"  oxyrule capacity:       {capacity:8.0f} req/s, p99 {service_run.p99_ms:.2f}"
                f" ms, errors {service_run.errors} "
                f"({capacity / floor_run.requests_per_second:.2f} of the floor)"
            )
            rate = round(capacity * args.fraction)
            headers = {"Content-Type": "application/fhir+json"}
            check = run_open_loop(
                floor_port, [Request("POST", FLOOR, headers, body)], rate=rate, seconds=10
            )
            print(f"open-loop client against the floor at {rate} req/s, 10 s: {check.summary()}")
            result = run_open_loop(
                server.port, [Request("POST", ASSESS, headers, body)], rate=rate, seconds=seconds
            )
            print(
                f"fixed rate {args.fraction:.0%} of capacity ({rate} req/s) for {seconds:g} s: "
                + result.summary()
            )
            print(f"statuses: {dict(sorted(result.statuses.items()))}")
            print(f"p99 ms per 10 s window: {result.windows()}")
            rss, hwm = server.memory_kib()
            print(
                f"server memory after the run: RSS {rss / 1024:.1f} MiB, peak {hwm / 1024:.1f} MiB"
            )
            if args.baseline_tree is not None:
                compare(args.baseline_tree, body, rate, seconds, min(max(args.rounds, 1), 5))
            verdict = "PASS" if result.bad == 0 else "FAIL"
            print(f"{verdict}: {result.bad} errors at {rate} req/s")
            if result.bad:
                raise SystemExit(1)
    finally:
        floor.terminate()
        floor.wait(15)


if __name__ == "__main__":
    main()
