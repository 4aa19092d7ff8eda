"""What running the assessment off the event loop costs (a command).

    python -m tests.benchmarks.work [--seconds 8] [--rounds 3] [--threads 0 1 2]

Starts ``oxyrule serve`` (one worker, as deployed) with ``OXYRULE_WORK_THREADS`` set to each
value in turn (0 runs the work on the event loop itself, as before; ``OXYRULE_INLINE_BYTES``
is 0, so that the demo Bundle goes to the threads although it is small) and loads it with ``wrk``
(1 thread, 16 connections, the demo Bundle), alternating the settings ``--rounds`` times. For
each run it prints the requests per second and, from ``/proc/<pid>/stat``, the server's CPU
time per request: on a machine shared with other work the rate follows whatever else runs,
while the CPU a request costs does not, so the ratio of CPU per request against the
on-the-loop floor (same run) is the figure to quote. Loopback only, bounded in time.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

from tests.benchmarks.http import ASSESS, BUNDLE, ROOT, free_port, with_wrk

CLOCK_TICKS = os.sysconf("SC_CLK_TCK")


def cpu_seconds(pid: int) -> float:
    """User and system CPU time of a process so far (``/proc/<pid>/stat`` fields 14, 15)."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / CLOCK_TICKS


def wait_ready(server: subprocess.Popen[bytes], port: int) -> None:
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/readyz", timeout=1):
                return
        except OSError:
            if server.poll() is not None:
                break
            time.sleep(0.1)
    server.kill()
    raise SystemExit("benchmark: the server did not start")


def measure(threads: int, seconds: float, body: Path) -> tuple[float, float]:
    """(requests per second, server CPU microseconds per request) of one run."""
    port = free_port()
    command = [sys.executable, "-m", "service.cli", "serve", "--port", str(port)]
    env = {k: v for k, v in os.environ.items() if not k.startswith("OXYRULE_")}
    # Every body to the threads (none assessed on the loop for being small): the demo Bundle
    # is under the default OXYRULE_INLINE_BYTES.
    env |= {
        "OXYRULE_WORK_THREADS": str(threads),
        "OXYRULE_INLINE_BYTES": "0",
        "OXYRULE_LOG_LEVEL": "warning",
    }
    server = subprocess.Popen(
        command, cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
    )
    wait_ready(server, port)
    try:
        url = f"http://127.0.0.1:{port}{ASSESS}"
        with_wrk(url, body, 16, 2)  # warm-up
        before = cpu_seconds(server.pid)
        run = with_wrk(url, body, 16, seconds)
        used = cpu_seconds(server.pid) - before
        if run.errors:
            raise SystemExit(f"benchmark: {run.errors} errors with {threads} threads")
        return run.requests_per_second, used / (run.requests_per_second * seconds) * 1e6
    finally:
        server.terminate()
        server.wait(20)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=8.0)
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--threads", type=int, nargs="+", default=[0, 1, 2])
    args = parser.parse_args()
    if subprocess.run(["which", "wrk"], capture_output=True).returncode:
        raise SystemExit("benchmark: needs wrk (Debian: apt-get install wrk)")
    seconds = min(args.seconds, 60.0)
    results: dict[int, list[tuple[float, float]]] = {t: [] for t in args.threads}
    with tempfile.TemporaryDirectory() as scratch:
        body = Path(scratch) / "bundle.json"
        body.write_bytes(BUNDLE.read_bytes())
        for n in range(args.rounds):
            for threads in args.threads:
                rate, cpu = measure(threads, seconds, body)
                results[threads].append((rate, cpu))
                print(
                    f"round {n + 1}, {threads} work threads: {rate:7.0f} req/s, "
                    f"{cpu:6.0f} µs CPU per request",
                    flush=True,
                )
    floor = statistics.median(cpu for _, cpu in results[args.threads[0]])
    print(f"\nmedians (CPU per request against {args.threads[0]} threads, same run):")
    for threads, runs in results.items():
        rate = statistics.median(r for r, _ in runs)
        cpu = statistics.median(c for _, c in runs)
        print(
            f"  {threads} work threads: {rate:7.0f} req/s, {cpu:6.0f} µs CPU/request "
            f"({cpu / floor:.2f}x)"
        )
    print(f"(the machine: {os.cpu_count()} cores; {os.getloadavg()[0]:.1f} load average now)")


if __name__ == "__main__":
    main()
