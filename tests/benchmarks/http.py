"""HTTP benchmark of ``POST /fhir/$assess-hypoxaemia`` against a bare FastAPI floor (a command).

    python -m tests.benchmarks.http [--seconds 10] [--rounds 2] [--connections 16]

Starts, on loopback ports, two uvicorn servers with one worker each and the same options as
``oxyrule serve`` (httptools + uvloop, no access log): the real service (``oxyrule serve``, its
request log on) and the floor, a FastAPI endpoint that reads the same body, parses it with
orjson and returns a constant. Both are loaded, in the same run and in alternation, with
``wrk`` (one thread, N connections, the demo Bundle as the body) when it is installed, else
with a bounded asyncio httpx client (which is slower than wrk, so its figures are lower).
Prints requests/s, p50 and p99 latency of each, and the service's share of the floor.

A third server, "hollow", is the real service with its assessment replaced by the demo's
result computed once at start: what the service does per request beyond assessing (body
reading, middleware, authentication, logs, metrics, content negotiation, writing the answer).
Its cost per request beyond the floor's is printed against the floor's whole request.
Traffic goes to 127.0.0.1 only, and every run is bounded in time.
"""

from __future__ import annotations

import argparse
import asyncio
import os
import re
import shutil
import socket
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.request
from dataclasses import dataclass
from pathlib import Path

import orjson
import uvicorn
from fastapi import FastAPI, Request, Response

ROOT = Path(__file__).resolve().parents[2]
BUNDLE = ROOT / "fixtures" / "demo" / "altitude-visitor.bundle.json"
ASSESS = "/fhir/$assess-hypoxaemia"
FLOOR = "/floor"
MAX_SECONDS = 60  # per run, whatever is asked


@dataclass(frozen=True, slots=True)
class Run:
    """One load run: answers with status 200 per second, latency percentiles of every answer in
    milliseconds, and the answers of any other status (a 429 when the service's
    ``max_concurrent_requests`` were in flight) or failed connections."""

    requests_per_second: float
    p50_ms: float
    p99_ms: float
    errors: int


def floor_app() -> FastAPI:
    """A bare FastAPI app: parse the body, answer a constant."""
    app = FastAPI()
    constant = orjson.dumps({"resourceType": "OperationOutcome", "issue": []})

    @app.post(FLOOR)
    async def floor(request: Request) -> Response:
        orjson.loads(await request.body())
        return Response(constant, media_type="application/fhir+json")

    return app


def serve_floor(port: int, workers: int) -> None:
    uvicorn.run(
        "tests.benchmarks.http:floor_app",
        factory=True,
        host="127.0.0.1",
        port=port,
        workers=workers,
        access_log=False,
        log_level="warning",
    )


def serve_hollow(port: int) -> int:
    """The service as ``oxyrule serve`` runs it, one worker, with the work a request does in
    its work thread (``answer_bundle``: parsing, reading, assessing, rendering, serialising;
    what ``tests.benchmarks.assess`` measures in process) replaced by the demo's answer, made
    once: what is left is the HTTP layer's own work."""
    import service.api.routes.assess as route
    from service.api.answers import Answered, answer_bundle
    from service.intake.limits import DEFAULT_READ_LIMITS
    from service.runtime import Runtime

    answered = answer_bundle(Runtime.load(), BUNDLE.read_bytes(), None, DEFAULT_READ_LIMITS)

    def made_once(*_: object) -> Answered:
        return answered

    route.answer_bundle = made_once  # type: ignore[attr-defined,assignment]  # looked up per request
    from service.api.server import serve

    return serve(host="127.0.0.1", port=port, workers=1)


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port: int = sock.getsockname()[1]
        return port


def start(command: list[str], port: int, probe: str) -> subprocess.Popen[bytes]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("OXYRULE_")}
    process = subprocess.Popen(
        command, cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
    )
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}{probe}", timeout=1):
                return process
        except OSError:
            if process.poll() is not None:
                break
            time.sleep(0.1)
    process.kill()
    raise SystemExit(f"benchmark: the server {command} did not start")


def check(url: str, body: bytes) -> None:
    request = urllib.request.Request(url, body, {"Content-Type": "application/fhir+json"})
    with urllib.request.urlopen(request, timeout=10) as answer:
        if answer.status != 200:
            raise SystemExit(f"benchmark: {url} answered {answer.status}")


_UNITS = {"us": 0.001, "ms": 1.0, "s": 1000.0}


def _ms(text: str) -> float:
    match = re.fullmatch(r"([\d.]+)(us|ms|s)", text)
    if not match:
        raise ValueError(f"unreadable wrk latency {text!r}")
    return float(match[1]) * _UNITS[match[2]]


def _find(pattern: str, text: str) -> str:
    match = re.search(pattern, text)
    if match is None:
        raise SystemExit(f"benchmark: no {pattern!r} in the wrk output:\n{text}")
    return match[1]


def with_wrk(url: str, body_file: Path, connections: int, seconds: float) -> Run:
    script = body_file.with_suffix(".lua")
    script.write_text(
        f'local f = io.open("{body_file}", "rb")\n'
        'wrk.method = "POST"\n'
        'wrk.body = f:read("*all")\n'
        "f:close()\n"
        'wrk.headers["Content-Type"] = "application/fhir+json"\n'
    )
    command = [
        "wrk",
        "-t1",
        f"-c{connections}",
        f"-d{seconds:g}s",
        "--latency",
        "-s",
        str(script),
        url,
    ]
    out = subprocess.run(
        command, capture_output=True, text=True, check=True, timeout=seconds + 30
    ).stdout
    total = int(_find(r"(\d+) requests in", out))
    duration = _ms(_find(r"requests in ([\d.]+m?s),", out)) / 1000
    p50 = _ms(_find(r"\s50%\s+(\S+)", out))
    p99 = _ms(_find(r"\s99%\s+(\S+)", out))
    errors = re.search(r"Non-2xx or 3xx responses:\s+(\d+)", out)
    socket_errors = re.search(r"Socket errors:.*", out)
    count = int(errors[1]) if errors else 0
    # Requests/s counts answers of every status; only the 200s are work done.
    rate = (total - count) / duration
    if socket_errors:
        count += sum(int(n) for n in re.findall(r"\d+", socket_errors[0]))
    return Run(rate, p50, p99, count)


async def _with_httpx(url: str, body: bytes, connections: int, seconds: float) -> Run:
    import httpx

    latencies: list[float] = []
    errors = 0
    stop = time.perf_counter() + seconds
    limits = httpx.Limits(max_connections=connections, max_keepalive_connections=connections)
    headers = {"Content-Type": "application/fhir+json"}
    async with httpx.AsyncClient(limits=limits, timeout=10) as client:

        async def worker() -> None:
            nonlocal errors
            while time.perf_counter() < stop:
                started = time.perf_counter()
                response = await client.post(url, content=body, headers=headers)
                latencies.append((time.perf_counter() - started) * 1000)
                errors += response.status_code != 200

        began = time.perf_counter()
        await asyncio.gather(*(worker() for _ in range(connections)))
        elapsed = time.perf_counter() - began
    cuts = statistics.quantiles(latencies, n=100)
    return Run((len(latencies) - errors) / elapsed, cuts[49], cuts[98], errors)


def load(url: str, body_file: Path, connections: int, seconds: float) -> Run:
    if shutil.which("wrk"):
        return with_wrk(url, body_file, connections, seconds)
    return asyncio.run(_with_httpx(url, body_file.read_bytes(), connections, seconds))


def _tree(pid: int) -> list[int]:
    """``pid`` and its descendants (from ``/proc``; empty once it has gone)."""
    found, queue = [], [pid]
    while queue:
        current = queue.pop()
        found.append(current)
        try:
            children = Path(f"/proc/{current}/task/{current}/children").read_text().split()
        except OSError:
            continue
        queue.extend(int(child) for child in children)
    return found


def worker_peaks_mib(pid: int, workers: int) -> list[float]:
    """Peak resident memory (VmHWM) of each process that serves requests under ``pid``: the
    process itself with one worker, else its worker processes (uvicorn starts them with
    multiprocessing's spawn; the supervisor and any helper process are left out)."""
    peaks = []
    for current in _tree(pid):
        try:
            status = Path(f"/proc/{current}/status").read_text()
            command = Path(f"/proc/{current}/cmdline").read_bytes()
        except OSError:
            continue
        serving = current == pid if workers == 1 else b"spawn_main" in command
        match = re.search(r"VmHWM:\s+(\d+) kB", status)
        if serving and match:
            peaks.append(int(match[1]) / 1024)
    return peaks


def core_microseconds(body: bytes, rounds: int = 300) -> float:
    """Median in-process cost of the assess path alone (bytes → result bytes), no HTTP."""
    from service.runtime import Runtime

    runtime = Runtime.load()
    samples = []
    for i in range(rounds + 30):
        started = time.perf_counter()
        orjson.dumps(runtime.assess_bundle(orjson.loads(body)))
        if i >= 30:  # warm-up
            samples.append((time.perf_counter() - started) * 1e6)
    return statistics.median(samples)


def median_of(runs: list[Run], field: str) -> float:
    return float(statistics.median(float(getattr(run, field)) for run in runs))


def measure(
    workers: int, connections: list[int], seconds: float, rounds: int, body: bytes
) -> tuple[dict[tuple[str, int], list[Run]], list[float]]:
    """Every server for ``workers`` at every connection count; and the service's workers'
    peak memory after it all."""
    service_port, floor_port, hollow_port = free_port(), free_port(), free_port()
    python = sys.executable
    commands = {
        "service": (
            [
                python,
                "-m",
                "service.cli",
                "serve",
                f"--port={service_port}",
                f"--workers={workers}",
            ],
            service_port,
            "/readyz",
            ASSESS,
        ),
        "floor": (
            [
                python,
                "-m",
                "tests.benchmarks.http",
                f"--serve-floor={floor_port}",
                f"--floor-workers={workers}",
            ],
            floor_port,
            "/docs",
            FLOOR,
        ),
    }
    if workers == 1:
        commands["hollow"] = (
            [python, "-m", "tests.benchmarks.http", "--serve-hollow", str(hollow_port)],
            hollow_port,
            "/readyz",
            ASSESS,
        )
    processes: dict[str, subprocess.Popen[bytes]] = {}
    results: dict[tuple[str, int], list[Run]] = {}
    try:
        for name, (command, port, probe, _) in commands.items():
            processes[name] = start(command, port, probe)
        urls = {
            name: f"http://127.0.0.1:{port}{path}" for name, (_, port, _, path) in commands.items()
        }
        for url in urls.values():
            check(url, body)
        with tempfile.TemporaryDirectory() as work:
            body_file = Path(work) / "body.json"
            body_file.write_bytes(body)
            for url in urls.values():  # warm-up, not counted
                load(url, body_file, max(connections), min(2.0, seconds))
            for count in connections:
                for _ in range(rounds):
                    for name, url in urls.items():
                        run = load(url, body_file, count, seconds)
                        results.setdefault((name, count), []).append(run)
        peaks = worker_peaks_mib(processes["service"].pid, workers)
    finally:
        for process in processes.values():
            process.terminate()
            process.wait(15)
    return results, peaks


def report(workers: int, results: dict[tuple[str, int], list[Run]], peaks: list[float]) -> None:
    print(f"\n{workers} uvicorn worker{'s' if workers > 1 else ''} each (httptools, uvloop)")
    print(f"{'server':<44} {'conns':>5} {'req/s':>9} {'p50 ms':>8} {'p99 ms':>8} {'not 200':>7}")
    labels = {
        "floor": "floor: FastAPI, orjson.loads, constant",
        "service": "oxyrule POST /fhir/$assess-hypoxaemia",
        "hollow": "the same, its answer made once",
    }
    for (name, count), runs in sorted(
        results.items(), key=lambda item: (item[0][1], list(labels).index(item[0][0]))
    ):
        errors = sum(run.errors for run in runs)
        print(
            f"{labels[name]:<44} {count:5d} {median_of(runs, 'requests_per_second'):9.0f} "
            f"{median_of(runs, 'p50_ms'):8.2f} {median_of(runs, 'p99_ms'):8.2f} {errors:7d}"
        )
    for count in sorted({count for _, count in results}):
        service = results[("service", count)]
        floor_rate = median_of(results[("floor", count)], "requests_per_second")
        ratio = median_of(service, "requests_per_second") / floor_rate
        p99 = median_of(service, "p99_ms")
        print(
            f"{count} connections: service / floor throughput {ratio:.2f} (target >= 0.5: "
            f"{'met' if ratio >= 0.5 else 'NOT met'}); service p99 {p99:.2f} ms"
            + (f" (target < 25 ms: {'met' if p99 < 25 else 'NOT met'})" if count == 16 else "")
        )
        if ("hollow", count) in results:
            # One saturated worker: a request's cost is the inverse of the throughput.
            floor_us = 1e6 / floor_rate
            hollow_rate = median_of(results[("hollow", count)], "requests_per_second")
            own_us = 1e6 / hollow_rate - floor_us
            print(
                f"  the service's own work per request beyond the floor's: {own_us:.0f} us "
                f"against the floor's whole request, {floor_us:.0f} us ({own_us / floor_us:.2f};"
                f" target <= 1: {'met' if own_us <= floor_us else 'NOT met'})"
            )
    shown = ", ".join(f"{peak:.0f}" for peak in peaks) or "not found"
    verdict = "met" if peaks and max(peaks) <= 80 else "NOT met"
    print(f"service worker peak resident memory, MiB: {shown} (target <= 80: {verdict})")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=5.0, help="per run (at most 60)")
    parser.add_argument("--rounds", type=int, default=2, help="alternating runs of each server")
    parser.add_argument("--connections", type=int, nargs="+", default=[16, 64])
    parser.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    parser.add_argument("--serve-floor", type=int, metavar="PORT", help=argparse.SUPPRESS)
    parser.add_argument("--floor-workers", type=int, default=1, help=argparse.SUPPRESS)
    parser.add_argument("--serve-hollow", type=int, metavar="PORT", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.serve_floor:
        serve_floor(args.serve_floor, min(max(args.floor_workers, 1), 8))
        return
    if args.serve_hollow:
        raise SystemExit(serve_hollow(args.serve_hollow))
    seconds = min(max(args.seconds, 1.0), MAX_SECONDS)
    connections = sorted({min(max(count, 1), 256) for count in args.connections})
    worker_counts = sorted({min(max(count, 1), 8) for count in args.workers})
    rounds = min(max(args.rounds, 1), 5)
    body = BUNDLE.read_bytes()
    core_us = core_microseconds(body)
    tool = "wrk (1 thread)" if shutil.which("wrk") else "asyncio httpx client (wrk not found)"
    print(f"load: {tool}, {rounds} x {seconds:g} s per server and connection count")
    print(f"body: {BUNDLE.name}, {len(body)} bytes")
    for workers in worker_counts:
        results, peaks = measure(workers, connections, seconds, rounds, body)
        report(workers, results, peaks)
        if workers == 1:
            # Where the time goes: the assess path itself, measured in this process, bounds
            # the ratio.
            count = connections[0]
            floor_rate = median_of(results[("floor", count)], "requests_per_second")
            ceiling = 1 / (1 / floor_rate + core_us / 1e6)
            share = median_of(results[("service", count)], "requests_per_second") / ceiling
            print(
                f"assess path alone, in process: {core_us:.0f} us per Bundle; with an HTTP "
                f"layer that cost nothing beyond the floor the service would reach "
                f"{ceiling:.0f} req/s at {count} connections (ratio {ceiling / floor_rate:.2f}); "
                f"it reaches {share:.0%} of that"
            )


if __name__ == "__main__":
    main()
