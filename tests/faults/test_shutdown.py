"""SIGTERM while requests are in flight, against a real ``oxyrule serve`` process.

The order a load balancer needs: readiness (``/readyz``) answers 503 first while the server
still answers; requests in flight run to their end; then the process stops accepting and
exits with status 0 (not killed by the signal).
"""

from __future__ import annotations

import http.client
import json
import signal
import subprocess
import sys
import threading
import time
import urllib.error
import urllib.request
from pathlib import Path

from tests.api.conftest import ALTITUDE, ASSESS, ROOT
from tests.api.test_serve import environment, free_port, wait_ready
from tests.faults.conftest import raw_connection, read_answer
from tests.faults.test_http_faults import _dechunk

LINES = 10
EVERY_S = 0.3


def readyz(port: int) -> int:
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/readyz", timeout=2) as answer:
            return int(answer.status)
    except urllib.error.HTTPError as refused:
        return refused.code


def slow_ndjson(port: int, answers: list[bytes]) -> None:
    """An NDJSON upload of LINES Bundles, one every EVERY_S seconds; keeps the whole answer."""
    line = json.dumps(json.loads(ALTITUDE.read_bytes())).encode() + b"\n"
    sock = raw_connection(port, timeout=30)
    sock.sendall(
        f"POST {ASSESS} HTTP/1.1\r\nHost: 127.0.0.1\r\n"
        "Content-Type: application/fhir+ndjson\r\nTransfer-Encoding: chunked\r\n\r\n".encode()
    )
    for _ in range(LINES):
        sock.sendall(f"{len(line):x}\r\n".encode() + line + b"\r\n")
        time.sleep(EVERY_S)
    sock.sendall(b"0\r\n\r\n")
    answers.append(read_answer(sock))
    sock.close()


def test_sigterm_drains_readiness_first_finishes_requests_then_exits_0(tmp_path: Path) -> None:
    port = free_port()
    log = tmp_path / "stderr.log"
    with log.open("wb") as stderr:
        process = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "serve", "--port", str(port)],
            cwd=ROOT,
            env=environment(),
            stdout=subprocess.DEVNULL,
            stderr=stderr,
        )
        try:
            wait_ready(port, process)
            answers: list[bytes] = []
            upload = threading.Thread(target=slow_ndjson, args=(port, answers))
            upload.start()
            time.sleep(2 * EVERY_S)  # two lines answered, eight to come
            process.send_signal(signal.SIGTERM)
            time.sleep(0.1)
            assert readyz(port) == 503  # not ready, yet still answering
            # A keep-alive client is told to go elsewhere: without Connection: close its next
            # request on this connection would be reset when the server stops (3 resets).
            connection = http.client.HTTPConnection("127.0.0.1", port, timeout=5)
            connection.request("GET", "/healthz")
            probe = connection.getresponse()
            probe.read()
            connection.close()
            assert (probe.status, probe.getheader("connection")) == (200, "close")
            upload.join(30)
            status = process.wait(30)
        finally:
            if process.poll() is None:
                process.kill()
                process.wait(5)
    assert status == 0
    (answer,) = answers
    assert answer.startswith(b"HTTP/1.1 200")
    lines = [json.loads(x) for x in _dechunk(answer.partition(b"\r\n\r\n")[2]).splitlines()]
    assert [x["resourceType"] for x in lines] == ["Bundle"] * LINES  # every line answered
    text = log.read_text()
    assert "stopping: draining" in text
    assert "Traceback" not in text


def test_a_second_sigterm_stops_at_once_still_with_status_0() -> None:
    port = free_port()
    process = subprocess.Popen(
        [sys.executable, "-m", "service.cli", "serve", "--port", str(port)],
        cwd=ROOT,
        env=environment(),
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        wait_ready(port, process)
        started = time.monotonic()
        process.send_signal(signal.SIGTERM)
        time.sleep(0.1)
        process.send_signal(signal.SIGTERM)
        assert process.wait(15) == 0
        assert time.monotonic() - started < 1.0  # did not sit out the drain window
    finally:
        if process.poll() is None:
            process.kill()
            process.wait(5)
