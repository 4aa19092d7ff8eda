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
    """One load run: throughput and latency percentiles in milliseconds."""

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


def serve_floor(port: int) -> None:
    uvicorn.run(floor_app(), host="127.0.0.1", port=port, access_log=False, log_level="warning")


def serve_hollow(port: int) -> int:
    """The service as ``oxyrule serve`` runs it, one worker, with ``Runtime.assess_bundle``
    answering the demo's result, computed once, whatever it is sent."""
    from service.api.server import serve
    from service.runtime import Runtime

    answer = Runtime.load().assess_bundle(orjson.loads(BUNDLE.read_bytes()))

    def assess_bundle(self: Runtime, data: object, **_: object) -> dict[str, object]:
        return answer

    Runtime.assess_bundle = assess_bundle  # type: ignore[method-assign]
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
    rate = float(_find(r"Requests/sec:\s+([\d.]+)", out))
    p50 = _ms(_find(r"\s50%\s+(\S+)", out))
    p99 = _ms(_find(r"\s99%\s+(\S+)", out))
    errors = re.search(r"Non-2xx or 3xx responses:\s+(\d+)", out)
    socket_errors = re.search(r"Socket errors:.*", out)
    count = int(errors[1]) if errors else 0
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
    return Run(len(latencies) / elapsed, cuts[49], cuts[98], errors)


def load(url: str, body_file: Path, connections: int, seconds: float) -> Run:
    if shutil.which("wrk"):
        return with_wrk(url, body_file, connections, seconds)
    return asyncio.run(_with_httpx(url, body_file.read_bytes(), connections, seconds))


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


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=10.0, help="per run (at most 60)")
    parser.add_argument("--rounds", type=int, default=2, help="alternating runs of each server")
    parser.add_argument("--connections", type=int, default=16)
    parser.add_argument("--serve-floor", type=int, metavar="PORT", help=argparse.SUPPRESS)
    parser.add_argument("--serve-hollow", type=int, metavar="PORT", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.serve_floor:
        serve_floor(args.serve_floor)
        return
    if args.serve_hollow:
        raise SystemExit(serve_hollow(args.serve_hollow))
    seconds = min(max(args.seconds, 1.0), MAX_SECONDS)
    connections = min(max(args.connections, 1), 256)
    rounds = min(max(args.rounds, 1), 5)
    body = BUNDLE.read_bytes()
    core_us = core_microseconds(body)
    tool = "wrk (1 thread)" if shutil.which("wrk") else "asyncio httpx client (wrk not found)"
    service_port, floor_port, hollow_port = free_port(), free_port(), free_port()
    servers = [
        start(
            [sys.executable, "-m", "service.cli", "serve", "--port", str(service_port)],
            service_port,
            "/readyz",
        ),
        start(
            [sys.executable, "-m", "tests.benchmarks.http", "--serve-floor", str(floor_port)],
            floor_port,
            "/docs",
        ),
        start(
            [sys.executable, "-m", "tests.benchmarks.http", "--serve-hollow", str(hollow_port)],
            hollow_port,
            "/readyz",
        ),
    ]
    service_url = f"http://127.0.0.1:{service_port}{ASSESS}"
    floor_url = f"http://127.0.0.1:{floor_port}{FLOOR}"
    hollow_url = f"http://127.0.0.1:{hollow_port}{ASSESS}"
    results: dict[str, list[Run]] = {"floor": [], "service": [], "hollow": []}
    try:
        check(service_url, body)
        check(floor_url, body)
        check(hollow_url, body)
        with tempfile.TemporaryDirectory() as work:
            body_file = Path(work) / "body.json"
            body_file.write_bytes(body)
            for url in (floor_url, service_url, hollow_url):  # warm-up, not counted
                load(url, body_file, connections, min(2.0, seconds))
            for _ in range(rounds):
                results["floor"].append(load(floor_url, body_file, connections, seconds))
                results["service"].append(load(service_url, body_file, connections, seconds))
                results["hollow"].append(load(hollow_url, body_file, connections, seconds))
    finally:
        for process in servers:
            process.terminate()
            process.wait(15)

    def median(name: str, field: str) -> float:
        return float(statistics.median(float(getattr(run, field)) for run in results[name]))

    print(f"load: {tool}, {connections} connections, {rounds} x {seconds:g} s per server")
    print(f"body: {BUNDLE.name}, {len(body)} bytes; 1 uvicorn worker each (httptools, uvloop)")
    print(f"{'server':<44} {'req/s':>9} {'p50 ms':>8} {'p99 ms':>8} {'errors':>7}")
    for name, label in (
        ("floor", "floor: FastAPI, orjson.loads, constant"),
        ("service", "oxyrule POST /fhir/$assess-hypoxaemia"),
        ("hollow", "the same, its assessment a constant result"),
    ):
        errors = sum(run.errors for run in results[name])
        print(
            f"{label:<44} {median(name, 'requests_per_second'):9.0f} "
            f"{median(name, 'p50_ms'):8.2f} {median(name, 'p99_ms'):8.2f} {errors:7d}"
        )
    ratio = median("service", "requests_per_second") / median("floor", "requests_per_second")
    p99 = median("service", "p99_ms")
    verdict = "met" if ratio >= 0.5 else "NOT met"
    print(f"service / floor throughput: {ratio:.2f} (target >= 0.5: {verdict})")
    print(f"service p99: {p99:.2f} ms (target < 25 ms: {'met' if p99 < 25 else 'NOT met'})")
    # One saturated worker: a request's cost is the inverse of the throughput.
    floor_us = 1e6 / median("floor", "requests_per_second")
    own_us = 1e6 / median("hollow", "requests_per_second") - floor_us
    verdict = "met" if own_us <= floor_us else "NOT met"
    print(
        f"the service's own work per request beyond the floor's: {own_us:.0f} us against the "
        f"floor's whole request, {floor_us:.0f} us ({own_us / floor_us:.2f}; target <= 1: "
        f"{verdict})"
    )
    for name in ("floor", "service", "hollow"):
        rates = ", ".join(f"{run.requests_per_second:.0f}" for run in results[name])
        print(f"  {name} req/s per round: {rates}")
    # Where the time goes: the assess path itself, measured in this process, bounds the ratio.
    floor_rate = median("floor", "requests_per_second")
    ceiling = 1 / (1 / floor_rate + core_us / 1e6)
    share = median("service", "requests_per_second") / ceiling
    print(
        f"assess path alone, in process: {core_us:.0f} us per Bundle; with an HTTP layer that "
        f"cost nothing beyond the floor the service would reach {ceiling:.0f} req/s "
        f"(ratio {ceiling / floor_rate:.2f}); it reaches {share:.0%} of that"
    )


if __name__ == "__main__":
    main()
