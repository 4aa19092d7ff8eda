"""CDS Hooks benchmark: ``patient-view`` with prefetch beside ``$assess-hypoxaemia`` (a command).

    python -m tests.benchmarks.cds [--seconds 10] [--connections 8] [--latency 300]

Starts two ``oxyrule serve`` processes with one worker each on loopback ports: one that
trusts an EHR signing with an ES384 key made here (``OXYRULE_CDS_CLIENTS`` with an inline JWK
Set), one that accepts unsigned CDS calls. The same invented patient (the post-operative demo,
its times moved to the last hour so that the hooks' recency window keeps them) is sent as a
Bundle to ``$assess-hypoxaemia`` and as prefetch to ``patient-view``; the JWTs (a fresh
``jti`` each) are signed before the timed part. For each, in the same run and interleaved (so
that whatever else the machine does weighs on all alike): the median latency of
``--latency`` sequential requests on one connection, and requests per second with
``--connections`` concurrent connections (a bounded asyncio httpx client, slower than the
server, so the figures are the client's too) over ``--seconds`` in half-second slices taken
in turn. Prints each figure and its ratio to ``$assess-hypoxaemia``. Loopback only, bounded
in time; the machine may be shared, so compare the ratios.
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
SLICE_S = 0.5


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


@dataclass(slots=True)
class Target:
    """One thing measured: its URL, body, JWTs (None: unsigned), and what was seen."""

    url: str
    body: bytes
    signed: list[str] | None
    samples: list[float]
    done: int = 0
    busy_s: float = 0.0
    errors: int = 0

    def headers(self) -> dict[str, str]:
        headers = {"Content-Type": "application/json"}
        if self.signed is not None:
            headers["Authorization"] = f"Bearer {self.signed.pop()}"
        return headers


async def latency(targets: list[Target], count: int) -> None:
    """Sequential requests, one connection each, the targets in turn (so that whatever else
    the machine does weighs on all of them alike)."""
    async with httpx.AsyncClient(timeout=10) as client:
        for _ in range(count):
            for target in targets:
                started = time.perf_counter()
                answer = await client.post(
                    target.url, content=target.body, headers=target.headers()
                )
                target.samples.append((time.perf_counter() - started) * 1000)
                target.errors += answer.status_code != 200


async def throughput(targets: list[Target], connections: int, seconds: float) -> None:
    """``connections`` concurrent clients on one target at a time, in slices of half a second
    taken in turn until each target had ``seconds``."""
    limits = httpx.Limits(max_connections=connections, max_keepalive_connections=connections)
    async with httpx.AsyncClient(limits=limits, timeout=10) as client:
        for _ in range(max(1, round(seconds / SLICE_S))):
            for target in targets:
                stop = time.perf_counter() + SLICE_S

                async def worker(target: Target = target, stop: float = stop) -> None:
                    while time.perf_counter() < stop:
                        answer = await client.post(
                            target.url, content=target.body, headers=target.headers()
                        )
                        target.done += 1
                        target.errors += answer.status_code != 200

                began = time.perf_counter()
                await asyncio.gather(*(worker() for _ in range(connections)))
                target.busy_s += time.perf_counter() - began


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=10.0, help="throughput, each (<= 30)")
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
    needed = args.latency + int(seconds * 4000)
    targets = {
        "$assess-hypoxaemia": Target(open_base + ASSESS, bundle, None, []),
        "patient-view": Target(open_base + SERVICE, hook, None, []),
        "patient-view, ES384 JWT": Target(
            signed_base + SERVICE, hook, tokens(signed_base, needed), []
        ),
    }
    try:
        asyncio.run(latency(list(targets.values()), args.latency))
        asyncio.run(throughput(list(targets.values()), args.connections, seconds))
    finally:
        for server in servers:
            server.terminate()
            server.wait(timeout=15)
    floor = targets["$assess-hypoxaemia"]
    floor_ms, floor_rate = statistics.median(floor.samples), floor.done / floor.busy_s
    sys.stdout.write(
        f"1 worker each; latency: {args.latency} sequential requests each, interleaved; "
        f"throughput: {args.connections} connections, {seconds:g} s each in interleaved "
        f"{SLICE_S:g} s slices\n"
        f"{'':<26}{'median ms':>10}{'x assess':>10}{'req/s':>9}{'x assess':>10}{'errors':>8}\n"
    )
    for name, target in targets.items():
        ms, rate = statistics.median(target.samples), target.done / target.busy_s
        sys.stdout.write(
            f"{name:<26}{ms:>10.2f}{ms / floor_ms:>10.2f}{rate:>9.0f}{rate / floor_rate:>10.2f}"
            f"{target.errors:>8}\n"
        )


if __name__ == "__main__":
    main()
