"""A bounded soak: moderate mixed traffic for ten minutes, the server's memory sampled (a command).

    python -m tests.load.soak [--seconds 600] [--rate 300] [--every 5] [--warm-up 60]

One ``oxyrule serve`` worker gets an open-loop mix of every kind of request it serves (the
three demo Bundles, a small NDJSON batch, a Bundle it refuses with 422, a body that is not
JSON, an HL7 v2 message answered AA and one answered AE, metrics, metadata, readiness) at a
fixed rate, while its resident memory (VmRSS in ``/proc/<pid>/status``) is sampled every few
seconds. After the warm-up, RSS may grow by less than 10 %: the run states the growth from the
end of the warm-up to the end, and the largest sample, and fails beyond 10 % or on any 5xx or
connection error. Loopback only; bounded in time (at most 15 minutes) and count.
"""

from __future__ import annotations

import argparse
import asyncio
import json

from tests.load.common import (
    ASSESS,
    DEMO,
    ROOT,
    OpenLoopResult,
    Request,
    Server,
    memory_kib,
    open_loop,
)

MAX_SECONDS = 900
LIMIT = 0.10


def mix() -> list[Request]:
    fhir = {"Content-Type": "application/fhir+json"}
    v2 = {"Content-Type": "x-application/hl7-v2+er7"}
    bundles = [p.read_bytes() for p in sorted(DEMO.glob("*.bundle.json"))]
    compact = [json.dumps(json.loads(b), separators=(",", ":")).encode() for b in bundles]
    broken = json.loads(bundles[0])
    for entry in broken["entry"]:
        quantity = entry["resource"].get("valueQuantity")
        if quantity:
            quantity["code"] = "psi"  # a unit the service refuses: 422, located
    message = (ROOT / "fixtures" / "hl7v2" / "altitude-visitor.hl7").read_bytes()
    return [
        *(Request("POST", ASSESS, fhir, b) for b in bundles),
        Request("POST", ASSESS, {"Content-Type": "application/fhir+ndjson"}, b"\n".join(compact)),
        Request("POST", ASSESS, fhir, json.dumps(broken).encode()),
        Request("POST", ASSESS, fhir, b'{"resourceType": "Bundle", '),
        Request("POST", ASSESS + "?units=kPa", fhir, bundles[1]),
        Request("POST", "/hl7v2", v2, message),
        Request("POST", "/hl7v2", v2, message.replace(b"||48|", b"||forty-eight|")),
        Request("GET", "/metrics", {}),
        Request("GET", "/fhir/metadata", {}),
        Request("GET", "/readyz", {}),
    ]


async def soak(
    server: Server, rate: float, seconds: float, every: float
) -> tuple[OpenLoopResult, list[tuple[float, int]]]:
    samples: list[tuple[float, int]] = []
    loop = asyncio.get_running_loop()
    started = loop.time()

    async def sample() -> None:
        while loop.time() - started < seconds + 1:
            samples.append((loop.time() - started, memory_kib(server.pid)[0]))
            await asyncio.sleep(every)

    sampler = asyncio.create_task(sample())
    result = await open_loop(
        server.port,
        mix(),
        rate=rate,
        seconds=seconds,
        connections=16,
        expected=frozenset({200, 400, 422}),
    )
    sampler.cancel()
    samples.append((loop.time() - started, memory_kib(server.pid)[0]))
    return result, samples


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=600.0, help="at most 900")
    parser.add_argument("--rate", type=float, default=300.0, help="requests per second")
    parser.add_argument("--every", type=float, default=5.0, help="seconds between RSS samples")
    parser.add_argument("--warm-up", type=float, default=60.0, help="seconds not judged")
    args = parser.parse_args()
    seconds = min(max(args.seconds, 10.0), MAX_SECONDS)
    with Server() as server:
        result, samples = asyncio.run(soak(server, args.rate, seconds, args.every))
        _, peak = server.memory_kib()
    warm = [rss for t, rss in samples if t >= min(args.warm_up, seconds / 2)]
    base, last, top = warm[0], warm[-1], max(warm)
    growth, top_growth = (last - base) / base, (top - base) / base
    print(f"soak: {seconds:g} s at {args.rate:g} req/s of a {len(mix())}-request mix")
    print(result.summary())
    print(f"statuses: {dict(sorted(result.statuses.items()))}")
    print(f"p99 ms per 60 s window: {result.windows(60)}")
    print(
        "RSS MiB at 0 s, end of warm-up, end: "
        f"{samples[0][1] / 1024:.1f}, {base / 1024:.1f}, {last / 1024:.1f}; "
        f"largest after warm-up {top / 1024:.1f}; peak (VmHWM) {peak / 1024:.1f}"
    )
    print(
        f"RSS growth after warm-up: {growth:+.1%} at the end, {top_growth:+.1%} at the largest "
        f"sample (limit {LIMIT:.0%}); {len(samples)} samples every {args.every:g} s"
    )
    print("samples (s, MiB): " + ", ".join(f"{t:.0f}:{r / 1024:.1f}" for t, r in samples))
    failed = top_growth >= LIMIT or result.bad > 0
    print(("FAIL" if failed else "PASS") + f": {result.bad} errors, growth {top_growth:+.1%}")
    if failed:
        raise SystemExit(1)


if __name__ == "__main__":
    main()
