"""CDS Hooks benchmark: ``patient-view`` with prefetch beside ``$assess-hypoxaemia`` (a command).

    python -m tests.benchmarks.cds [--seconds 5] [--rounds 2] [--connections 8] [--latency 300]

Starts two ``oxyrule serve`` processes with one worker each on loopback ports: one that
trusts an EHR signing with an ES384 key made here (``OXYRULE_CDS_CLIENTS`` with an inline JWK
Set), one that accepts unsigned CDS calls. The same invented patient (the post-operative demo,
its times moved to the last hour so that the hooks' recency window keeps them) is sent as a
Bundle to ``$assess-hypoxaemia`` and as prefetch to ``patient-view``; the JWTs (a fresh
``jti`` each) are signed before the timed part. For each, in the same run and in alternation:
the median latency of ``--latency`` sequential requests on one connection, and requests per
second with ``--connections`` concurrent connections (a bounded asyncio httpx client) for
``--seconds``. Prints each figure and its ratio to ``$assess-hypoxaemia``. Loopback only,
bounded in time; the machine may be shared, so compare the ratios.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import statistics
import subprocess
import sys
import time
import uuid
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import httpx
import jwt
from cryptography.hazmat.primitives.asymmetric import ec
from jwt.algorithms import ECAlgorithm

from tests.benchmarks.http import free_port

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "fixtures" / "demo" / "post-operative-drowsiness.bundle.json"
ISSUER = "https://ehr.invented.test"
SERVICE = "/cds-services/hypoxaemia-mechanism"
ASSESS = "/fhir/$assess-hypoxaemia"
KEY = ec.generate_private_key(ec.SECP384R1())
MAX_SECONDS = 30


@dataclass(frozen=True, slots=True)
class Figures:
    median_ms: float
    requests_per_second: float
    errors: int


def bodies() -> tuple[bytes, bytes]:
    """The demo patient as a Bundle and as a patient-view request with prefetch, its
    observations moved to the last hour."""
    bundle = json.loads(DEMO.read_text())
    times = [
        datetime.fromisoformat(e["resource"]["effectiveDateTime"])
        for e in bundle["entry"]
        if "effectiveDateTime" in e["resource"]
    ]
    shift = datetime.now(UTC) - timedelta(hours=1) - max(times)
    for entry in bundle["entry"]:
        resource = entry["resource"]
        if "effectiveDateTime" in resource:
            moved = datetime.fromisoformat(resource["effectiveDateTime"]) + shift
            resource["effectiveDateTime"] = moved.isoformat()
    patient = next(
        e["resource"] for e in bundle["entry"] if e["resource"]["resourceType"] == "Patient"
    )
    observations = [
        e["resource"] for e in bundle["entry"] if e["resource"]["resourceType"] == "Observation"
    ]
    gas_codes = {"2703-7", "2019-8", "2744-1", "1960-4", "2708-6"}

    def code(resource: dict[str, Any]) -> str:
        text: str = resource["code"]["coding"][0]["code"]
        return text

    def searchset(chosen: list[dict[str, Any]]) -> dict[str, Any]:
        return {
            "resourceType": "Bundle",
            "type": "searchset",
            "entry": [{"resource": r} for r in chosen],
        }

    hook = {
        "hook": "patient-view",
        "hookInstance": str(uuid.uuid4()),
        "context": {"userId": "Practitioner/invented", "patientId": patient["id"]},
        "prefetch": {
            "patient": patient,
            "bloodGases": searchset([r for r in observations if code(r) in gas_codes]),
            "oximetry": searchset([]),
            "oxygenSettings": searchset([r for r in observations if code(r) == "3150-0"]),
            "otherInputs": searchset(
                [r for r in observations if code(r) not in gas_codes | {"3150-0"}]
            ),
        },
    }
    return json.dumps(bundle).encode(), json.dumps(hook).encode()


def start(port: int, extra_env: dict[str, str]) -> subprocess.Popen[bytes]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("OXYRULE_")} | extra_env
    command = [sys.executable, "-m", "service.cli", "serve", "--port", str(port), "--workers", "1"]
    process = subprocess.Popen(
        command, cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
    )
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        try:
            if httpx.get(f"http://127.0.0.1:{port}/readyz", timeout=1).status_code == 200:
                return process
        except httpx.HTTPError:
            if process.poll() is not None:
                break
            time.sleep(0.1)
    process.kill()
    raise SystemExit(f"benchmark: the server on port {port} did not start")


def tokens(base: str, count: int) -> list[str]:
    now = int(time.time())
    claims = {"iss": ISSUER, "aud": base + SERVICE, "iat": now, "exp": now + 290}
    header = {"typ": "JWT", "kid": "bench-es-1"}
    return [
        jwt.encode(claims | {"jti": uuid.uuid4().hex}, KEY, "ES384", header) for _ in range(count)
    ]


async def measure(
    url: str,
    body: bytes,
    *,
    signed: list[str] | None,
    latency: int,
    connections: int,
    seconds: float,
) -> Figures:
    headers = {"Content-Type": "application/json"}
    pool = iter(signed or [])

    def with_token() -> dict[str, str]:
        return headers | ({"Authorization": f"Bearer {next(pool)}"} if signed else {})

    errors = 0
    async with httpx.AsyncClient(timeout=10) as client:
        samples = []
        for _ in range(latency):
            started = time.perf_counter()
            answer = await client.post(url, content=body, headers=with_token())
            samples.append((time.perf_counter() - started) * 1000)
            errors += answer.status_code != 200
    limits = httpx.Limits(max_connections=connections, max_keepalive_connections=connections)
    done = 0
    stop = time.perf_counter() + seconds
    async with httpx.AsyncClient(limits=limits, timeout=10) as client:

        async def worker() -> None:
            nonlocal done, errors
            while time.perf_counter() < stop:
                answer = await client.post(url, content=body, headers=with_token())
                done += 1
                errors += answer.status_code != 200

        began = time.perf_counter()
        await asyncio.gather(*(worker() for _ in range(connections)))
        elapsed = time.perf_counter() - began
    return Figures(statistics.median(samples), done / elapsed, errors)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=5.0, help="throughput run (at most 30)")
    parser.add_argument("--rounds", type=int, default=2)
    parser.add_argument("--connections", type=int, default=8)
    parser.add_argument("--latency", type=int, default=300, help="sequential requests")
    args = parser.parse_args()
    seconds = min(args.seconds, MAX_SECONDS)
    bundle, hook = bodies()
    signed_port, open_port = free_port(), free_port()
    signed_base = f"http://127.0.0.1:{signed_port}"
    jwk = json.loads(ECAlgorithm.to_jwk(KEY.public_key())) | {"kid": "bench-es-1", "alg": "ES384"}
    clients = [{"iss": ISSUER, "jwks": {"keys": [jwk]}}]
    servers = [
        start(
            signed_port,
            {"OXYRULE_CDS_CLIENTS": json.dumps(clients), "OXYRULE_CDS_BASE_URL": signed_base},
        ),
        start(open_port, {"OXYRULE_CDS_ALLOW_UNSIGNED": "true"}),
    ]
    open_base = f"http://127.0.0.1:{open_port}"
    check = httpx.post(
        open_base + SERVICE, content=hook, headers={"Content-Type": "application/json"}
    )
    if check.status_code != 200 or not check.json()["cards"]:
        raise SystemExit(f"benchmark: patient-view answered {check.status_code} {check.text[:200]}")
    runs: dict[str, list[Figures]] = {
        "$assess-hypoxaemia": [],
        "patient-view": [],
        "patient-view, ES384 JWT": [],
    }
    try:
        for _ in range(args.rounds):
            common = {"latency": args.latency, "connections": args.connections, "seconds": seconds}
            runs["$assess-hypoxaemia"].append(
                asyncio.run(measure(open_base + ASSESS, bundle, signed=None, **common))
            )
            runs["patient-view"].append(
                asyncio.run(measure(open_base + SERVICE, hook, signed=None, **common))
            )
            needed = args.latency + int(seconds * 4000)
            runs["patient-view, ES384 JWT"].append(
                asyncio.run(
                    measure(
                        signed_base + SERVICE, hook, signed=tokens(signed_base, needed), **common
                    )
                )
            )
    finally:
        for server in servers:
            server.terminate()
            server.wait(timeout=15)
    floor = runs["$assess-hypoxaemia"]
    floor_ms = statistics.median(f.median_ms for f in floor)
    floor_rate = statistics.median(f.requests_per_second for f in floor)
    sys.stdout.write(
        f"1 worker each, {args.connections} connections for throughput, "
        f"{args.latency} sequential requests for latency, {args.rounds} round(s)\n"
        f"{'':<26}{'median ms':>10}{'x assess':>10}{'req/s':>9}{'x assess':>10}{'errors':>8}\n"
    )
    for name, figures in runs.items():
        ms = statistics.median(f.median_ms for f in figures)
        rate = statistics.median(f.requests_per_second for f in figures)
        errors = sum(f.errors for f in figures)
        sys.stdout.write(
            f"{name:<26}{ms:>10.2f}{ms / floor_ms:>10.2f}{rate:>9.0f}{rate / floor_rate:>10.2f}"
            f"{errors:>8}\n"
        )


if __name__ == "__main__":
    main()
