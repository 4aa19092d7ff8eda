"""Hostile load against a real ``oxyrule serve``: the figures of the README's evidence table.

    python -m tests.load.hostile [--tree DIR] [--seconds 20] [SCENARIO ...]

Scenarios (all by default, each bounded in time, loopback only):

* ``worst``: the time to answer the worst in-limit Bundle and HL7 v2 message (the most values
  and gases the budgets allow), as a ratio to the demo Bundle's and message's, median of 7.
* ``healthz``: 16 clients send hostile inputs (the worst in-limit ones, and the oversized
  ones of issue 13: 100,000 entries, 20,000 components, 100,000 components in one field)
  for ``--seconds`` while a prober asks ``/healthz`` every 50 ms with the liveness probe's
  2 s timeout: its p50, p99, max and failures.
* ``amplification``: 16 clients send the 3.7 MB Bundle of 100,000 entries and the worst
  in-limit Bundle and never read the answers, for ``--seconds``: the server's RSS before,
  at its peak (VmHWM) and at the end.
* ``mllp``: a server with an MLLP listener and 256 file descriptors (soft and hard); 300
  idle MLLP peers connect; then ``/healthz`` 20 times, and a message on a kept peer.
* ``ndjson``: 4 uploads that send a line and then a newline every 2 s (how long each holds
  its slot, at most ``--seconds`` × 3); and a 9 MB body of 1,600 lines from httpx, which
  sends its whole body before it reads.
* ``workers``: ``--workers 2`` with 8 keep-alive clients polling ``/readyz``: a reload to a
  new rule-set version (answers from the old set after the first from the new one; errors),
  then SIGTERM (503s seen, errors on reused connections).

``--env NAME=VALUE`` sets a variable (a setting) for every server started. ``--tree DIR`` runs
the server from another checkout (``git worktree add /tmp/before main``)
with this same client, for the figures before a change. The machine is shared: ratios and
counts drift less than absolute times.
"""

from __future__ import annotations

import argparse
import http.client
import json
import os
import resource
import shutil
import signal
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
import urllib.request
from collections import Counter
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path

from tests.hl7v2.builders import PERCENT, msh, obr, obx, pid
from tests.hostile.corpus import (
    DEMO,
    V2_DEMO,
    components,
    demo,
    dumps,
    field_of,
    v2,
    with_entries,
)
from tests.load.common import HOST, ROOT, free_port, memory_kib, percentile

ASSESS = "/fhir/$assess-hypoxaemia"
EXTRA_ENV: dict[str, str] = {}  # --env NAME=VALUE: settings of every server started
FHIR = {"Content-Type": "application/fhir+json"}
V2 = {"Content-Type": "x-application/hl7-v2+er7"}
NDJSON = {"Content-Type": "application/fhir+ndjson"}


# --- inputs ------------------------------------------------------------------------------


def worst_bundle() -> bytes:
    """1,000 entries (the budget): 998 arterial PaO2 an hour apart, each a gas to pair."""
    bundle = demo()
    index = next(i for i, e in enumerate(bundle["entry"]) if "valueQuantity" in e["resource"])
    pao2 = bundle["entry"][index]
    bundle["entry"] = bundle["entry"][:2]
    for n in range(998):
        copy = json.loads(json.dumps(pao2))
        copy.pop("fullUrl", None)
        copy["resource"]["id"] = f"pao2-{n}"
        copy["resource"]["effectiveDateTime"] = (
            f"2026-11-{1 + (n // 24) % 28:02d}T{n % 24:02d}:{(n * 7) % 60:02d}:00Z"
        )
        bundle["entry"].append(copy)
    return dumps(bundle)


def worst_message() -> bytes:
    """500 segments (the budget): 497 OBX of PaO2, PaCO2 and FiO2 at distinct times, each
    padded with empty components up to the budget of parts (20,000)."""
    kinds = [
        ("2703-7", "62", "mm[Hg]^mmHg^UCUM"),
        ("2019-8", "45", "mm[Hg]^mmHg^UCUM"),
        ("3150-0", "21", PERCENT),
    ]
    segments = [msh(), pid(), obr()]
    for n in range(497):
        code, value, unit = kinds[n % 3]
        when = f"202601{1 + (n // 72) % 28:02d}{(n // 3) % 24:02d}{(n * 7) % 60:02d}00+0100"
        segments.append(obx(n + 1, code, value, unit, when=when) + "|" + "^" * 20)
    return "\r".join(segments).encode()


def hostile_mix() -> list[tuple[str, str, dict[str, str], bytes]]:
    """(name, path, headers, body) of what the hostile clients send, in turn."""
    return [
        ("worst-bundle", ASSESS, FHIR, worst_bundle()),
        ("worst-message", "/hl7v2", V2, worst_message()),
        ("100k-entries", ASSESS, FHIR, with_entries(100_000, {"resourceType": "Condition"})),
        ("20k-components", ASSESS, FHIR, components(20_000)),
        ("100k-components-v2", "/hl7v2", V2, v2(field_of("OBX", 5, "48" + "^" * 100_000))()),
    ]


# --- the server --------------------------------------------------------------------------


@contextmanager
def server(
    root: Path, *args: str, nofile: int | None = None, **env: str
) -> Iterator[tuple[subprocess.Popen[bytes], int]]:
    """``oxyrule serve`` from the checkout ``root`` on a free loopback port."""
    port = free_port()
    clean = {k: v for k, v in os.environ.items() if not k.startswith("OXYRULE_")}
    clean |= {"OXYRULE_LOG_LEVEL": "warning"} | EXTRA_ENV | env

    def limit() -> None:
        if nofile is not None:
            resource.setrlimit(resource.RLIMIT_NOFILE, (nofile, nofile))

    process = subprocess.Popen(
        [sys.executable, "-m", "service.cli", "serve", "--port", str(port), *args],
        cwd=root,
        env=clean,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        preexec_fn=limit,
    )
    try:
        deadline = time.monotonic() + 60
        while True:
            try:
                with urllib.request.urlopen(f"http://{HOST}:{port}/readyz", timeout=1):
                    break
            except OSError:
                if process.poll() is not None or time.monotonic() > deadline:
                    raise SystemExit(f"the server did not start ({process.poll()})") from None
                time.sleep(0.1)
        yield process, port
    finally:
        if process.poll() is None:
            process.kill()
        process.wait(30)


def post(port: int, path: str, headers: dict[str, str], body: bytes, timeout: float) -> int:
    connection = http.client.HTTPConnection(HOST, port, timeout=timeout)
    try:
        connection.request("POST", path, body, headers)
        answer = connection.getresponse()
        answer.read()
        return answer.status
    finally:
        connection.close()


def healthz(port: int, timeout: float = 2.0) -> float | None:
    """Seconds /healthz took, or None when it failed or took longer than ``timeout``."""
    started = time.perf_counter()
    try:
        with urllib.request.urlopen(f"http://{HOST}:{port}/healthz", timeout=timeout) as answer:
            answer.read()
            return time.perf_counter() - started if answer.status == 200 else None
    except OSError:
        return None


# --- scenarios -----------------------------------------------------------------------------


def scenario_worst(root: Path, seconds: float) -> None:
    del seconds
    cases = [
        ("demo Bundle", ASSESS, FHIR, DEMO.read_bytes()),
        ("worst in-limit Bundle", ASSESS, FHIR, worst_bundle()),
        ("demo HL7 v2 message", "/hl7v2", V2, V2_DEMO.read_bytes().replace(b"\n", b"\r")),
        ("worst in-limit HL7 v2 message", "/hl7v2", V2, worst_message()),
    ]
    with server(root) as (_, port):
        times: dict[str, float] = {}
        for name, path, headers, body in cases:
            samples = []
            for n in range(9):
                started = time.perf_counter()
                status = post(port, path, headers, body, timeout=120)
                if n >= 2:
                    samples.append(time.perf_counter() - started)
            times[name] = statistics.median(samples)
            print(
                f"  {name}: {len(body):,} bytes, status {status}, "
                f"median {times[name] * 1000:.1f} ms"
            )
        for worst, base in (
            ("worst in-limit Bundle", "demo Bundle"),
            ("worst in-limit HL7 v2 message", "demo HL7 v2 message"),
        ):
            print(f"  {worst}: {times[worst] / times[base]:.0f}x the {base}")


def scenario_healthz(root: Path, seconds: float) -> None:
    mix = hostile_mix()
    with server(root) as (process, port):
        stop = threading.Event()
        statuses: Counter[str] = Counter()

        def hostile(offset: int) -> None:
            n = offset
            while not stop.is_set():
                name, path, headers, body = mix[n % len(mix)]
                n += 1
                try:
                    statuses[f"{name} {post(port, path, headers, body, timeout=seconds + 60)}"] += 1
                except OSError:
                    statuses[f"{name} error"] += 1

        clients = [threading.Thread(target=hostile, args=(i,), daemon=True) for i in range(16)]
        for client in clients:
            client.start()
        probes: list[float | None] = []
        rss: list[int] = []
        deadline = time.monotonic() + seconds
        time.sleep(0.5)
        while time.monotonic() < deadline:
            probes.append(healthz(port))
            rss.append(memory_kib(process.pid)[0])
            time.sleep(0.05)
        stop.set()
        ok = [p * 1000 for p in probes if p is not None]
        failed = sum(p is None for p in probes)
        print(
            f"  /healthz while 16 hostile clients ran {seconds:g} s: {len(probes)} probes, "
            f"{failed} failed or over the 2 s probe timeout; p50 {percentile(ok, 50):.1f} ms, "
            f"p99 {percentile(ok, 99):.1f} ms, max {max(ok, default=float('nan')):.1f} ms"
        )
        print(f"  server RSS during the run: max {max(rss) / 1024:.0f} MiB")
        print(f"  hostile answers: {dict(sorted(statuses.items()))}")


def scenario_amplification(root: Path, seconds: float) -> None:
    bodies = [
        ("100k-entries", with_entries(100_000, {"resourceType": "Condition"})),
        ("worst-bundle", worst_bundle()),
    ]
    with server(root) as (process, port):
        time.sleep(1)
        before = memory_kib(process.pid)[0]
        stop = threading.Event()
        sent: Counter[str] = Counter()

        def never_reads(offset: int) -> None:
            held: list[socket.socket] = []
            n = offset
            while not stop.is_set():
                name, body = bodies[n % len(bodies)]
                n += 1
                try:
                    sock = socket.create_connection((HOST, port), timeout=10)
                    sock.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 4096)
                    head = (
                        f"POST {ASSESS} HTTP/1.1\r\nHost: {HOST}\r\nContent-Type: "
                        f"application/fhir+json\r\nContent-Length: {len(body)}\r\n\r\n"
                    )
                    sock.sendall(head.encode() + body)
                    held.append(sock)
                    sent[name] += 1
                except OSError:
                    sent["error"] += 1
                if len(held) > 32:
                    held.pop(0).close()
                time.sleep(0.05)
            for sock in held:
                sock.close()

        clients = [threading.Thread(target=never_reads, args=(i,), daemon=True) for i in range(16)]
        for client in clients:
            client.start()
        samples = []
        deadline = time.monotonic() + seconds
        while time.monotonic() < deadline:
            samples.append(memory_kib(process.pid)[0])
            time.sleep(0.5)
        alive = healthz(port)
        stop.set()
        for client in clients:
            client.join(30)
        rss, peak = memory_kib(process.pid)
        print(f"  16 clients sending and never reading for {seconds:g} s: {dict(sent)}")
        print(
            f"  server RSS: {before / 1024:.0f} MiB before, largest sample "
            f"{max(samples) / 1024:.0f} MiB, peak (VmHWM) {peak / 1024:.0f} MiB, "
            f"{rss / 1024:.0f} MiB at the end; /healthz at the end "
            f"{'failed' if alive is None else f'{alive * 1000:.0f} ms'}"
        )


def scenario_mllp(root: Path, seconds: float) -> None:
    del seconds
    mllp_port = free_port()
    with server(root, "--mllp-port", str(mllp_port), nofile=256) as (process, port):
        before = memory_kib(process.pid)[0]
        peers: list[socket.socket] = []
        refused = 0
        for _ in range(300):
            try:
                peers.append(socket.create_connection((HOST, mllp_port), timeout=5))
            except OSError:
                refused += 1
        time.sleep(1.0)
        closed = 0
        for peer in peers:
            peer.setblocking(False)
            try:
                closed += peer.recv(1) == b""
            except BlockingIOError:
                pass
            except OSError:
                closed += 1
        probes = [healthz(port) for _ in range(20)]
        ok = [p * 1000 for p in probes if p is not None]
        answered = "no kept peer"
        for peer in peers:
            peer.setblocking(True)
            peer.settimeout(20)
            try:
                message = V2_DEMO.read_bytes().replace(b"\n", b"\r")
                peer.sendall(b"\x0b" + message + b"\x1c\r")
                reply = peer.recv(65536)
                answered = "AA" if b"MSA|AA" in reply else f"answered {reply[:40]!r}"
                break
            except OSError:
                continue
        rss = memory_kib(process.pid)[0]
        for peer in peers:
            peer.close()
        print(
            f"  300 idle MLLP peers, 256 descriptors: {len(peers) - closed} kept, "
            f"{closed + refused} refused or closed by the server"
        )
        print(
            f"  /healthz: {len(ok)} of 20 answered within 2 s, p99 {percentile(ok, 99):.1f} ms;"
            f" a message on a kept peer: {answered}; RSS {before / 1024:.0f} -> "
            f"{rss / 1024:.0f} MiB"
        )
        took = normal_ack_beside_quadratic_messages(mllp_port)
        print(
            "  a normal message's ACK while 8 peers each send a 41 kB message of 40,000 "
            f"components: {took:.2f} s"
        )


def normal_ack_beside_quadratic_messages(port: int) -> float:
    """Seconds for a normal message's ACK while 8 other peers each send a 41 kB message with
    40,000 components in one field (the case that made a normal ACK wait 40 s)."""
    heavy = v2(field_of("OBX", 5, "48" + "^" * 40_000))()
    normal = V2_DEMO.read_bytes().replace(b"\n", b"\r")
    senders = []
    for _ in range(8):
        sock = socket.create_connection((HOST, port), timeout=120)
        sock.sendall(b"\x0b" + heavy + b"\x1c\r")
        senders.append(sock)
    started = time.monotonic()
    with socket.create_connection((HOST, port), timeout=120) as sock:
        sock.sendall(b"\x0b" + normal + b"\x1c\r")
        reply = b""
        while not reply.endswith(b"\x1c\r"):
            chunk = sock.recv(65536)
            if not chunk:
                break
            reply += chunk
    took = time.monotonic() - started
    for sock in senders:
        sock.close()
    return took


def scenario_ndjson(root: Path, seconds: float) -> None:
    import httpx

    line = json.dumps(json.loads(DEMO.read_bytes())).encode() + b"\n"
    bound = seconds * 3
    with server(root) as (_, port):
        held: list[float] = []

        def trickle() -> None:
            sock = socket.create_connection((HOST, port), timeout=bound + 10)
            started = time.monotonic()
            head = (
                f"POST {ASSESS} HTTP/1.1\r\nHost: {HOST}\r\nContent-Type: "
                "application/fhir+ndjson\r\nTransfer-Encoding: chunked\r\n\r\n"
            )
            sock.sendall(head.encode() + f"{len(line):x}\r\n".encode() + line + b"\r\n")
            try:
                while time.monotonic() - started < bound:
                    time.sleep(2)
                    sock.sendall(b"1\r\n\n\r\n")
                    sock.setblocking(False)
                    try:
                        if sock.recv(1 << 16) == b"":
                            break
                    except BlockingIOError:
                        pass
                    finally:
                        sock.setblocking(True)
            except OSError:
                pass
            held.append(time.monotonic() - started)
            sock.close()

        threads = [threading.Thread(target=trickle) for _ in range(4)]
        for thread in threads:
            thread.start()
        for thread in threads:
            thread.join(bound + 30)
        print(
            "  4 uploads sending a newline every 2 s: slots held "
            + ", ".join(f"{h:.0f}" for h in held)
            + f" s (the run stops them at {bound:g} s)"
        )
        body = line * 1600
        started = time.monotonic()
        try:
            answer = httpx.post(
                f"http://{HOST}:{port}{ASSESS}", content=body, headers=NDJSON, timeout=60
            )
            lines = len(answer.content.splitlines())
            outcome = f"status {answer.status_code}, {lines} of 1600 lines"
        except httpx.HTTPError as exc:
            outcome = f"{type(exc).__name__} (hung until the 60 s timeout)"
        print(
            f"  httpx, 9 MB NDJSON body (1,600 lines), sends then reads: {outcome} in "
            f"{time.monotonic() - started:.1f} s"
        )


def scenario_workers(root: Path, seconds: float) -> None:
    del seconds
    with tempfile.TemporaryDirectory() as scratch:
        rules = Path(scratch) / "rules"
        shutil.copytree(ROOT / "rules", rules)
        with server(root, "--workers", "2", OXYRULE_RULES_DIR=str(rules)) as (process, port):
            stop = threading.Event()
            seen: list[tuple[float, float, str | None, int, bool]] = []

            def poll() -> None:
                connection = http.client.HTTPConnection(HOST, port, timeout=10)
                reused = False
                while not stop.is_set():
                    started = time.monotonic()
                    try:
                        connection.request("GET", "/readyz")
                        answer = connection.getresponse()
                        body = answer.read()
                        version = json.loads(body).get("ruleset") if answer.status == 200 else None
                        seen.append((started, time.monotonic(), version, answer.status, reused))
                        reused = (answer.getheader("connection") or "").lower() != "close"
                        if not reused:
                            connection.close()
                    except (OSError, http.client.HTTPException):
                        seen.append((started, time.monotonic(), None, 0, reused))
                        reused = False
                        connection.close()
                        time.sleep(0.05)
                    time.sleep(0.005)

            clients = [threading.Thread(target=poll, daemon=True) for _ in range(8)]
            for client in clients:
                client.start()
            time.sleep(2)
            manifest = rules / "ruleset.yaml"
            text = manifest.read_text()
            old = next(x for x in text.splitlines() if x.startswith("version:"))
            manifest.write_text(text.replace(old, "version: 9.9.9-reload", 1))
            from service.config import Settings
            from service.runtime import Runtime
            from service.workbench.lock import write_lock

            write_lock(rules, Runtime.load(Settings(rules_dir=rules)).ruleset)
            reloaded = time.monotonic()
            process.send_signal(signal.SIGHUP)
            time.sleep(8)
            terminated = time.monotonic()
            process.send_signal(signal.SIGTERM)
            process.wait(60)
            stop.set()
            for client in clients:
                client.join(20)
    during = [s for s in seen if reloaded <= s[0] < terminated]
    new = [s for s in during if s[2] and "9.9.9-reload" in s[2]]
    first_new = min((s[1] for s in new), default=None)
    mixed = [
        s for s in during if first_new and s[0] > first_new and s[2] and "9.9.9-reload" not in s[2]
    ]
    errors = [s for s in during if s[3] != 200]
    stopping = [s for s in seen if s[0] >= terminated]
    print(
        f"  reload under 8 keep-alive clients: {len(during)} answers, {len(errors)} errors; "
        f"{len(mixed)} answered by the old rule set after the first from the new one"
        + ("" if first_new else " (the new rule set never answered)")
    )
    print(
        f"  SIGTERM: {sum(s[3] == 503 for s in stopping)} readiness 503s; "
        f"{sum(s[3] == 0 and s[4] for s in stopping)} errors on reused keep-alive "
        f"connections; exit status {process.returncode}"
    )


SCENARIOS: dict[str, Callable[[Path, float], None]] = {
    "worst": scenario_worst,
    "healthz": scenario_healthz,
    "amplification": scenario_amplification,
    "mllp": scenario_mllp,
    "ndjson": scenario_ndjson,
    "workers": scenario_workers,
}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("scenarios", nargs="*", help=", ".join(SCENARIOS) + " (default: all)")
    parser.add_argument("--tree", type=Path, default=ROOT, help="checkout to run the server from")
    parser.add_argument("--seconds", type=float, default=20.0, help="per timed scenario (<= 120)")
    parser.add_argument(
        "--env", action="append", default=[], metavar="NAME=VALUE", help="for every server"
    )
    args = parser.parse_args()
    EXTRA_ENV.update(item.split("=", 1) for item in args.env)
    seconds = min(args.seconds, 120.0)
    unknown = [name for name in args.scenarios if name not in SCENARIOS]
    if unknown:
        parser.error(f"unknown scenario {', '.join(unknown)}; choose from {', '.join(SCENARIOS)}")
    print(
        f"server from {args.tree.resolve()}; {os.cpu_count()} cores, load average "
        f"{os.getloadavg()[0]:.1f} (the machine is shared)"
    )
    for name in args.scenarios or SCENARIOS:
        print(f"{name}:", flush=True)
        SCENARIOS[name](args.tree.resolve(), seconds)


if __name__ == "__main__":
    main()
