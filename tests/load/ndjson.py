"""NDJSON of many Bundles through the CLI and the HTTP endpoint, with peak memory (a command).

    python -m tests.load.ndjson [--bundles 100000] [--baseline 10000] [--keep DIR]

Writes NDJSON files of ``--baseline`` and ``--bundles`` lines (the three invented demo Bundles
in turn, each with its own id) to a temporary directory, then for each size

* CLI: ``python -m service.cli assess big.ndjson``, its output read from a pipe and counted;
  peak RSS from the kernel's accounting of the finished child (``wait4`` ru_maxrss);
* HTTP: a fresh ``oxyrule serve`` worker; the file uploaded as a chunked stream
  (``application/fhir+ndjson``) while the answer is read as a stream, at the same time (the
  server answers each line as it comes and waits for the reader: backpressure), never held
  whole; the server's peak RSS (VmHWM in ``/proc/<pid>/status``) after the run.

Every input line must be answered by one output line, none refused. Memory must not grow with
the input: the peak at ``--bundles`` is stated beside (and as a ratio to) the peak at
``--baseline`` measured in the same run. Loopback only; each run has a time limit.
"""

from __future__ import annotations

import argparse
import json
import os
import socket
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO

from tests.load.common import ASSESS, DEMO, HOST, ROOT, Server, memory_kib

REFUSAL = b'\n{"resourceType":"OperationOutcome"'  # a top-level refusal line (not one inside)
CHUNK = 64 * 1024
RUN_LIMIT_S = 1200


def write_ndjson(path: Path, count: int) -> int:
    """``count`` lines of demo Bundles, each with its own id; the file's size in bytes."""
    bundles = [json.loads(p.read_bytes()) for p in sorted(DEMO.glob("*.bundle.json"))]
    with path.open("wb") as out:
        for i in range(count):
            bundle = bundles[i % len(bundles)]
            bundle["id"] = f"load-{i:06d}"
            out.write(json.dumps(bundle, separators=(",", ":")).encode() + b"\n")
    return path.stat().st_size


@dataclass
class Count:
    """Output lines and top-level refusals seen in a stream of chunks."""

    lines: int = 0
    refused: int = 0
    size: int = 0
    _tail: bytes = b"\n"

    def feed(self, chunk: bytes) -> None:
        self.lines += chunk.count(b"\n")
        self.size += len(chunk)
        joined = self._tail + chunk
        self.refused += joined.count(REFUSAL) - self._tail.count(REFUSAL)
        self._tail = joined[-len(REFUSAL) :]


@dataclass(frozen=True)
class Run:
    surface: str
    bundles: int
    seconds: float
    peak_kib: int
    lines: int
    refused: int

    def line(self) -> str:
        return (
            f"{self.surface:<5} {self.bundles:>7} bundles: {self.bundles / self.seconds:7.0f} "
            f"bundles/s ({self.seconds:6.1f} s), peak RSS {self.peak_kib / 1024:6.1f} MiB, "
            f"{self.lines} lines out, {self.refused} refused"
        )


def cli(path: Path, count: int) -> Run:
    env = {k: v for k, v in os.environ.items() if not k.startswith("OXYRULE_")}
    started = time.perf_counter()
    process = subprocess.Popen(
        [sys.executable, "-m", "service.cli", "assess", str(path)],
        cwd=ROOT,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL,
    )
    assert process.stdout is not None
    timer = threading.Timer(RUN_LIMIT_S, process.kill)
    timer.start()
    seen = Count()
    while chunk := process.stdout.read(CHUNK):
        seen.feed(chunk)
    _, status, usage = os.wait4(process.pid, 0)
    process.returncode = os.waitstatus_to_exitcode(status)
    timer.cancel()
    seconds = time.perf_counter() - started
    if process.returncode != 0:
        raise SystemExit(f"the CLI exited with {process.returncode}")
    return Run("CLI", count, seconds, usage.ru_maxrss, seen.lines, seen.refused)


def _chunks(path: Path) -> Iterator[bytes]:
    with path.open("rb") as source:
        while chunk := source.read(CHUNK):
            yield chunk


def _upload(sock: socket.socket, path: Path, port: int, failed: list[BaseException]) -> None:
    try:
        sock.sendall(
            f"POST {ASSESS} HTTP/1.1\r\nHost: {HOST}:{port}\r\n"
            "Content-Type: application/fhir+ndjson\r\nTransfer-Encoding: chunked\r\n\r\n".encode()
        )
        for chunk in _chunks(path):
            sock.sendall(b"%x\r\n" % len(chunk) + chunk + b"\r\n")
        sock.sendall(b"0\r\n\r\n")
    except OSError as exc:
        failed.append(exc)


def _read_answer(source: BinaryIO, seen: Count) -> int:
    """Read a chunked HTTP answer, feeding its body to ``seen``; the status."""
    status = int(source.readline().split(b" ", 2)[1])
    headers = b""
    while (line := source.readline()) not in (b"\r\n", b""):
        headers += line.lower()
    if b"transfer-encoding: chunked" not in headers:
        raise SystemExit(f"the server answered {status} without a stream")
    while size := int(source.readline().split(b";")[0], 16):
        seen.feed(source.read(size))
        source.readline()
    return status


def http(path: Path, count: int) -> Run:
    """Upload and download at once, as a streaming client must: the server answers each line
    as it reads it and stops reading while its answers are not taken (backpressure), so a
    client that sent the whole body before reading (httpx, requests) would wait for ever."""
    with Server() as server:
        seen = Count()
        failed: list[BaseException] = []
        started = time.perf_counter()
        with socket.create_connection((HOST, server.port), timeout=60) as sock:
            upload = threading.Thread(target=_upload, args=(sock, path, server.port, failed))
            upload.start()
            with sock.makefile("rb") as source:
                status = _read_answer(source, seen)
            upload.join(RUN_LIMIT_S)
        seconds = time.perf_counter() - started
        _, peak = memory_kib(server.pid)
    if status != 200 or failed:
        raise SystemExit(f"the HTTP run failed: status {status}, {failed}")
    return Run("HTTP", count, seconds, peak, seen.lines, seen.refused)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--bundles", type=int, default=100_000)
    parser.add_argument("--baseline", type=int, default=10_000)
    parser.add_argument("--keep", type=Path, help="write the files here instead of a temp dir")
    args = parser.parse_args()
    sizes = [max(1, min(args.baseline, 1_000_000)), max(1, min(args.bundles, 1_000_000))]
    with tempfile.TemporaryDirectory() as scratch:
        work = args.keep or Path(scratch)
        work.mkdir(parents=True, exist_ok=True)
        files = {}
        for size in sizes:
            files[size] = work / f"bundles-{size}.ndjson"
            written = write_ndjson(files[size], size)
            print(f"wrote {files[size].name}: {size} bundles, {written / 1e6:.0f} MB", flush=True)
        runs: list[Run] = []
        for surface in (cli, http):
            for size in sizes:
                run = surface(files[size], size)
                print(run.line(), flush=True)
                runs.append(run)
                if run.lines != size or run.refused:
                    raise SystemExit(f"{run.surface}: {run.lines} answers, {run.refused} refused")
    for name in ("CLI", "HTTP"):
        small, big = (r for r in runs if r.surface == name)
        print(
            f"{name}: peak RSS {big.peak_kib / 1024:.1f} MiB at {big.bundles} bundles vs "
            f"{small.peak_kib / 1024:.1f} MiB at {small.bundles} (ratio "
            f"{big.peak_kib / small.peak_kib:.2f} for {big.bundles / small.bundles:.0f}x input)"
        )


if __name__ == "__main__":
    main()
