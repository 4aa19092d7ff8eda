"""NDJSON uploads that hold the server: a trickle of newlines, an ordinary client that sends
its whole body before it reads, a client that never reads at all. Against a real server.

Before: each newline restarted the body timer (4 uploads sending ``\\n`` every 2 s held 4
concurrency slots for as long as they liked); a 9 MB body from ``http.client`` or httpx hung
client and server for ever, logged as a 200 with a fraction of its lines. Each test is bounded
by its socket timeouts, so on that code it fails instead of hanging.
"""

from __future__ import annotations

import http.client
import json
import socket
import threading
import time
from collections.abc import Callable

from fastapi import FastAPI

from tests.api.conftest import ALTITUDE, ASSESS
from tests.faults.conftest import raw_connection, read_answer
from tests.faults.test_http_faults import still_serves

LiveApp = Callable[..., tuple[FastAPI, int]]
LINE = json.dumps(json.loads(ALTITUDE.read_bytes())).encode() + b"\n"
CHUNKED = (
    f"POST {ASSESS} HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Type: application/fhir+ndjson\r\n"
    "Transfer-Encoding: chunked\r\n\r\n"
).encode()


def chunk(data: bytes) -> bytes:
    return f"{len(data):x}\r\n".encode() + data + b"\r\n"


def request_lines(logged: Callable[[], str]) -> list[dict[str, object]]:
    lines = [json.loads(line) for line in logged().splitlines() if line.startswith("{")]
    return [line for line in lines if line["message"] == "request"]


def test_a_trickle_of_newlines_runs_out_of_time_however_often_it_sends(
    live_app: LiveApp,
) -> None:
    # One byte every 0.2 s never waits longer than the 0.5 s pause allowed, but it is far
    # below the rate: refused once the grace (0.5 s) and the credit of its bytes (the first
    # line's ~8 kB at 20 kB/s: 0.4 s) are spent, after about five newlines.
    app, port = live_app(body_timeout_s=0.5, body_min_bytes_per_s=20_000)
    sock = raw_connection(port, timeout=10)
    started = time.monotonic()
    sock.sendall(CHUNKED + chunk(LINE))
    try:
        while time.monotonic() - started < 8:
            time.sleep(0.2)
            sock.sendall(chunk(b"\n"))
    except OSError:
        pass  # the server closed the connection: what is expected
    answer = read_answer(sock)
    took = time.monotonic() - started
    sock.close()
    assert answer.startswith(b"HTTP/1.1 200")
    last = [line for line in answer.split(b"\r\n") if line.startswith(b"{")][-1]
    issue = json.loads(last)["issue"][0]
    assert issue["code"] == "timeout" and "OXYRULE_BODY_MIN_BYTES_PER_S" in issue["diagnostics"]
    assert took < 8, took
    assert app.state.service.in_flight == 0
    still_serves(port)


def test_a_client_that_sends_its_whole_body_before_reading_is_answered_in_full(
    live_app: LiveApp, logged: Callable[[], str]
) -> None:
    # 1,600 lines, 9 MB: the case that hung http.client and httpx (the server stopped reading
    # while its answers waited, and the client was still sending). http.client sends the
    # whole body, then reads.
    _, port = live_app()
    body = LINE * 1600
    connection = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
    connection.request("POST", ASSESS, body, {"Content-Type": "application/fhir+ndjson"})
    response = connection.getresponse()
    answers = response.read().splitlines()
    connection.close()
    assert response.status == 200
    assert len(answers) == 1600
    assert all(json.loads(a)["resourceType"] == "Bundle" for a in (answers[0], answers[-1]))
    deadline = time.monotonic() + 5
    while not (found := [r for r in request_lines(logged) if r.get("lines") == 1600]):
        assert time.monotonic() < deadline
        time.sleep(0.05)
    assert found[0]["stream"] == "complete"


def test_a_client_that_never_reads_is_closed_and_the_log_says_why(
    live_app: LiveApp, logged: Callable[[], str]
) -> None:
    # A body larger than the read-ahead from a client that never reads: nothing can move.
    # After the body timeout without a byte moving either way, the connection is closed.
    app, port = live_app(body_timeout_s=1.0, max_body_bytes=65536, ndjson_read_ahead_bytes=65536)
    sock = raw_connection(port, timeout=20)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 4096)
    started = time.monotonic()
    broke = threading.Event()

    def send_for_ever() -> None:
        try:
            sock.sendall(CHUNKED)
            while time.monotonic() - started < 20:
                sock.sendall(chunk(LINE * 8))
        except OSError:
            broke.set()

    sender = threading.Thread(target=send_for_ever, daemon=True)
    sender.start()
    sender.join(25)
    took = time.monotonic() - started
    sock.close()
    assert broke.is_set(), "the server never gave up on a client that does not read"
    assert took < 15, took
    deadline = time.monotonic() + 5
    while not (found := [r for r in request_lines(logged) if r.get("stream")]):
        assert time.monotonic() < deadline
        time.sleep(0.05)
    assert found[0]["stream"] == "client-not-reading"
    assert isinstance(found[0]["lines"], int) and found[0]["lines"] > 0
    assert app.state.service.budget.used == 0
    still_serves(port)
