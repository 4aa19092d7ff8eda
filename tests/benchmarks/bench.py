"""Benchmark of the bench's what-if round trip (a separate command, not a test).

    python -m tests.benchmarks.bench [--rounds N]

Measured in the same run on the same invented demo case: the assess path in process (bytes →
result Bundle, the floor), the bench's view of the case with a what-if in process (read, assess
as sent, assess as changed, explain, draw the charts), and over loopback HTTP the assess
operation against the bench's what-if call (a real uvicorn server in this process). Each is
printed as a ratio to its floor; the page's weight is printed too.
"""

from __future__ import annotations

import argparse
import gzip
import http.client
import json
import statistics
import time
from pathlib import Path

import orjson

from service.api import create_app
from service.config import ServerSettings, Settings
from service.runtime import Runtime
from service.workbench import bench
from service.workbench.whatif import WhatIf
from tests.api.live import LiveServer
from tests.benchmarks.assess import median_us

ROOT = Path(__file__).resolve().parents[2]
CASE = ROOT / "fixtures" / "demo" / "post-operative-drowsiness.bundle.json"
STATIC = ROOT / "service" / "api" / "bench_static"


def _http_ms(port: int, path: str, body: bytes, content_type: str, rounds: int) -> float:
    connection = http.client.HTTPConnection("127.0.0.1", port, timeout=10)
    samples = []
    for i in range(rounds + 5):
        start = time.perf_counter()
        connection.request("POST", path, body, {"Content-Type": content_type})
        answer = connection.getresponse()
        answer.read()
        assert answer.status == 200, (path, answer.status)
        if i >= 5:
            samples.append((time.perf_counter() - start) * 1000)
    connection.close()
    return statistics.median(samples)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=100)
    args = parser.parse_args()
    raw = CASE.read_bytes()
    runtime = Runtime.load()
    changed = WhatIf(paco2_mmhg=50.0)

    floor = median_us(lambda: orjson.dumps(runtime.assess_bundle(orjson.loads(raw))), args.rounds)
    view = median_us(
        lambda: orjson.dumps(bench.view(runtime, raw, what_if=changed, unit="mm[Hg]")),
        max(args.rounds // 5, 20),
    )
    print(f"case: {CASE.name}")
    print(f"in process: assess path {floor / 1000:.2f} ms (floor)")
    print(f"in process: bench view with a what-if {view / 1000:.2f} ms = {view / floor:.1f}x")

    app = create_app(Settings(), ServerSettings(), runtime=runtime)
    what_if = json.dumps({"input": raw.decode(), "what_if": {"paco2_mmhg": 50}}).encode()
    with LiveServer(app) as server:
        assess = _http_ms(
            server.port, "/fhir/$assess-hypoxaemia", raw, "application/fhir+json", args.rounds
        )
        round_trip = _http_ms(
            server.port, "/bench/api/assess", what_if, "application/json", args.rounds
        )
    print(f"HTTP loopback: assess operation {assess:.2f} ms (floor)")
    print(f"HTTP loopback: bench what-if {round_trip:.2f} ms = {round_trip / assess:.1f}x")
    files = [STATIC / name for name in ("bench.html", "bench.js", "bench.css")]
    total = sum(f.stat().st_size for f in files)
    packed = len(gzip.compress(b"".join(f.read_bytes() for f in files), 9))
    print(f"page weight: {total:,} bytes in 3 files ({packed:,} gzip-compressed), no others")


if __name__ == "__main__":
    main()
