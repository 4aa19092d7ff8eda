"""What the load, soak and NDJSON runs share: a real server process, its memory, a bounded
open-loop HTTP client, and percentiles. Loopback only; every wait is bounded."""

from __future__ import annotations

import asyncio
import gc
import os
import socket
import statistics
import subprocess
import sys
import time
import urllib.request
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "fixtures" / "demo"
BUNDLE = DEMO / "altitude-visitor.bundle.json"
ASSESS = "/fhir/$assess-hypoxaemia"
HOST = "127.0.0.1"  # the only address any run here talks to


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind((HOST, 0))
        port: int = sock.getsockname()[1]
        return port


class Server:
    """``python -m service.cli serve`` (one worker, as deployed) on a free loopback port."""

    def __init__(self, *args: str, root: Path = ROOT, **env: str) -> None:
        """``root``: the checkout whose ``service`` package runs (another one for a baseline)."""
        self.port = free_port()
        clean = {k: v for k, v in os.environ.items() if not k.startswith("OXYRULE_")}
        self.process = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "serve", "--port", str(self.port), *args],
            cwd=root,
            env=clean | env,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline:
            if self.process.poll() is not None:
                raise SystemExit(f"the server exited with {self.process.returncode}")
            try:
                with urllib.request.urlopen(self.url("/readyz"), timeout=1):
                    return
            except OSError:
                time.sleep(0.1)
        self.stop()
        raise SystemExit("the server did not become ready in 30 s")

    def url(self, path: str) -> str:
        return f"http://{HOST}:{self.port}{path}"

    @property
    def pid(self) -> int:
        return self.process.pid

    def memory_kib(self) -> tuple[int, int]:
        """(VmRSS, VmHWM) of the server process, in KiB, from /proc/<pid>/status."""
        return memory_kib(self.pid)

    def stop(self) -> int:
        if self.process.poll() is None:
            self.process.terminate()
            try:
                self.process.wait(20)
            except subprocess.TimeoutExpired:
                self.process.kill()
                self.process.wait(5)
        return self.process.returncode

    def __enter__(self) -> Server:
        return self

    def __exit__(self, *_: object) -> None:
        self.stop()


def memory_kib(pid: int) -> tuple[int, int]:
    """(VmRSS, VmHWM) of a process in KiB (its resident and peak resident memory)."""
    values = {}
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        name, _, rest = line.partition(":")
        if name in ("VmRSS", "VmHWM"):
            values[name] = int(rest.split()[0])
    return values["VmRSS"], values["VmHWM"]


def percentile(values: Sequence[float], p: float) -> float:
    """The p-th percentile (0-100) by the nearest-rank method; NaN for no values."""
    if not values:
        return float("nan")
    ordered = sorted(values)
    rank = max(1, min(len(ordered), round(p / 100 * len(ordered) + 0.5)))
    return ordered[rank - 1]


@dataclass(frozen=True, slots=True)
class Request:
    """One request to send: method, path, headers and body, pre-encoded."""

    method: str
    path: str
    headers: dict[str, str]
    body: bytes = b""

    def encode(self, port: int) -> bytes:
        lines = [f"{self.method} {self.path} HTTP/1.1", f"Host: {HOST}:{port}"]
        lines += [f"{k}: {v}" for k, v in self.headers.items()]
        lines.append(f"Content-Length: {len(self.body)}")
        return ("\r\n".join(lines) + "\r\n\r\n").encode("latin-1") + self.body


class Connection:
    """One keep-alive HTTP/1.1 connection: send a request, read the whole answer.

    Written by hand (no HTTP library) so that the client costs little next to the server on a
    two-core machine; it understands what the service sends: Content-Length or chunked bodies.
    """

    def __init__(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        self.reader, self.writer = reader, writer

    @classmethod
    async def open(cls, port: int) -> Connection:
        reader, writer = await asyncio.wait_for(asyncio.open_connection(HOST, port), 10)
        return cls(reader, writer)

    async def send(self, raw: bytes, timeout: float = 10.0) -> int:
        """Send one encoded request and read its answer; the HTTP status."""
        self.writer.write(raw)
        async with asyncio.timeout(timeout):
            head = await self.reader.readuntil(b"\r\n\r\n")
            status = int(head.split(b" ", 2)[1])
            headers = head.lower()
            if b"transfer-encoding: chunked" in headers:
                while True:
                    size = int((await self.reader.readuntil(b"\r\n")).split(b";")[0], 16)
                    await self.reader.readexactly(size + 2)
                    if size == 0:
                        break
            else:
                start = headers.find(b"content-length:")
                length = (
                    int(headers[start + 15 : headers.index(b"\r\n", start)]) if start >= 0 else 0
                )
                await self.reader.readexactly(length)
            if b"connection: close" in headers:
                raise ConnectionResetError("the server closed the connection")
        return status

    def close(self) -> None:
        self.writer.close()


@dataclass
class OpenLoopResult:
    """What an open-loop run saw: latency from each request's scheduled send time."""

    rate: float
    seconds: float
    expected: frozenset[int] = frozenset({200})
    sent: int = 0
    statuses: dict[int, int] = field(default_factory=dict)
    errors: int = 0  # connection failures and timeouts
    latencies_ms: list[float] = field(default_factory=list)
    due_s: list[float] = field(default_factory=list)  # each latency's due time from the start
    dispatch_lag_ms: list[float] = field(default_factory=list)  # the client's own lateness
    elapsed: float = 0.0

    @property
    def ok(self) -> int:
        return sum(n for s, n in self.statuses.items() if s in self.expected)

    @property
    def bad(self) -> int:
        """Failures, timeouts and statuses outside the expected set."""
        return self.errors + sum(n for s, n in self.statuses.items() if s not in self.expected)

    def windows(self, seconds: float = 10.0) -> str:
        """p99 latency of each window of ``seconds`` (by due time): bursts or a steady drift."""
        buckets: dict[int, list[float]] = {}
        for due, latency in zip(self.due_s, self.latencies_ms, strict=True):
            buckets.setdefault(int(due // seconds), []).append(latency)
        return ", ".join(
            f"{int(k * seconds)}-{int((k + 1) * seconds)} s: {percentile(v, 99):.1f}"
            for k, v in sorted(buckets.items())
        )

    def summary(self) -> str:
        lat = self.latencies_ms
        return (
            f"held {self.sent / self.elapsed:.0f} req/s for {self.elapsed:.1f} s "
            f"(target {self.rate:g}); {self.ok} ok, {self.bad} errors; latency from the "
            f"scheduled send time p50 {percentile(lat, 50):.2f} ms, p99 {percentile(lat, 99):.2f}"
            f" ms, p99.9 {percentile(lat, 99.9):.2f} ms, max {max(lat, default=0):.2f} ms; "
            f"client dispatch lag p99 {percentile(self.dispatch_lag_ms, 99):.2f} ms"
        )


async def open_loop(
    port: int,
    requests: Sequence[Request],
    *,
    rate: float,
    seconds: float,
    connections: int = 32,
    expected: frozenset[int] = frozenset({200}),
) -> OpenLoopResult:
    """Send ``rate`` requests per second for ``seconds``, cycling through ``requests``.

    Open loop: request i is due at start + i / rate whatever happened to the earlier ones, and
    its latency counts from that due time, so a slow server cannot slow the arrivals down and
    hide its own queueing (coordinated omission). Requests wait for a free keep-alive
    connection of a fixed pool; that wait is part of their latency. A status outside
    ``expected`` or a failure counts as an error. Bounded: ``rate * seconds`` requests, each
    with a 10 s timeout, the whole run with a deadline of ``seconds + 30``.
    """
    loop = asyncio.get_running_loop()
    pool: asyncio.Queue[Connection] = asyncio.Queue()
    for _ in range(connections):
        pool.put_nowait(await Connection.open(port))
    encoded = [r.encode(port) for r in requests]
    result = OpenLoopResult(rate, seconds, expected)
    total = int(rate * seconds)
    tasks: set[asyncio.Task[None]] = set()  # in flight only: done ones are let go
    gc.collect()
    gc.freeze()  # the client's own full collections must not pause it (and count as latency)

    async def one(i: int, due: float) -> None:
        connection = await pool.get()
        try:
            status = await connection.send(encoded[i % len(encoded)])
            result.statuses[status] = result.statuses.get(status, 0) + 1
            result.latencies_ms.append((loop.time() - due) * 1000)
            result.due_s.append(due - start)
        except (OSError, TimeoutError, asyncio.IncompleteReadError, ValueError):
            result.errors += 1
            connection.close()
            connection = await Connection.open(port)
        finally:
            pool.put_nowait(connection)

    start = loop.time() + 0.05
    async with asyncio.timeout(seconds + 30):
        for i in range(total):
            due = start + i / rate
            delay = due - loop.time()
            if delay > 0:
                await asyncio.sleep(delay)
            result.dispatch_lag_ms.append(max(0.0, loop.time() - due) * 1000)
            task = asyncio.create_task(one(i, due))
            tasks.add(task)
            task.add_done_callback(tasks.discard)
            result.sent += 1
        while tasks:
            await asyncio.gather(*list(tasks))
    result.elapsed = loop.time() - start
    while not pool.empty():
        pool.get_nowait().close()
    return result


def run_open_loop(port: int, requests: Sequence[Request], **options: float) -> OpenLoopResult:
    """``open_loop`` in its own event loop (uvloop when installed, as the server uses)."""
    try:
        import uvloop

        return uvloop.run(open_loop(port, requests, **options))  # type: ignore[arg-type]
    except ImportError:
        return asyncio.run(open_loop(port, requests, **options))  # type: ignore[arg-type]


def median(values: Sequence[float]) -> float:
    return float(statistics.median(values))
