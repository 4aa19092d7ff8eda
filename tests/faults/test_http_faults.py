"""Faults of HTTP clients against a real server: a client that leaves mid-body, and a body that
comes too slowly (slowloris-style) and must hit the read timeout (``OXYRULE_BODY_TIMEOUT_S``).

Every test ends by checking that the server still answers a good request.
"""

from __future__ import annotations

import json
import socket
import time
from collections.abc import Callable

import httpx
from fastapi import FastAPI

from tests.api.conftest import ALTITUDE, ASSESS
from tests.faults.conftest import raw_connection, read_answer

LiveApp = Callable[..., tuple[FastAPI, int]]
HEAD = "POST {path} HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Type: {type}\r\n{length}\r\n\r\n".format
BUNDLE = ALTITUDE.read_bytes()


def still_serves(port: int) -> None:
    answer = httpx.post(
        f"http://127.0.0.1:{port}{ASSESS}",
        content=BUNDLE,
        headers={"Content-Type": "application/fhir+json"},
        timeout=10,
    )
    assert answer.status_code == 200


def metrics(port: int) -> str:
    return httpx.get(f"http://127.0.0.1:{port}/metrics", timeout=10).text


def test_a_client_that_leaves_mid_body_is_logged_as_gone_not_as_an_error(
    live_app: LiveApp, logged: Callable[[], str]
) -> None:
    app, port = live_app()
    for path, kind in ((ASSESS, "application/fhir+json"), ("/hl7v2", "application/hl7-v2")):
        sock = raw_connection(port)
        head = HEAD(path=path, type=kind, length=f"Content-Length: {len(BUNDLE)}")
        sock.sendall(head.encode() + BUNDLE[:1000])
        time.sleep(0.2)
        sock.setsockopt(socket.SOL_SOCKET, socket.SO_LINGER, b"\x01\x00\x00\x00\x00\x00\x00\x00")
        sock.close()  # a reset, mid-body
    time.sleep(0.5)
    still_serves(port)
    lines = [json.loads(line) for line in logged().splitlines() if line.startswith("{")]
    requests = [line for line in lines if line["message"] == "request"]
    assert [r["status"] for r in requests if r["route"] != ASSESS or r["status"] != 200] == [
        499,
        499,
    ]
    assert not [line for line in lines if line["level"] in ("error", "critical")]
    text = metrics(port)
    assert 'status="500"' not in text
    assert "oxyrule_assessments_in_flight 0" in text
    assert app.state.service.in_flight == 0


def test_a_slow_bundle_body_is_refused_408_after_the_timeout(live_app: LiveApp) -> None:
    _, port = live_app(body_timeout_s=0.5)
    for path, kind in ((ASSESS, "application/fhir+json"), ("/hl7v2", "application/hl7-v2")):
        sock = raw_connection(port)
        started = time.monotonic()
        head = HEAD(path=path, type=kind, length=f"Content-Length: {len(BUNDLE)}")
        sock.sendall(head.encode() + BUNDLE[:10])
        for byte in BUNDLE[10:14]:  # a trickle: one byte every 0.2 s, never the whole body
            time.sleep(0.2)
            try:
                sock.sendall(bytes([byte]))
            except OSError:
                break
        answer = read_answer(sock)
        took = time.monotonic() - started
        sock.close()
        status_line, _, rest = answer.partition(b"\r\n")
        assert status_line.startswith(b"HTTP/1.1 408"), answer[:200]
        headers, _, body = rest.partition(b"\r\n\r\n")
        assert b"connection: close" in headers.lower()
        issue = json.loads(body)["issue"][0]
        assert issue["code"] == "timeout" and "expression" not in issue  # the body as a whole
        assert "OXYRULE_BODY_TIMEOUT_S" in issue["diagnostics"]
        assert 0.4 < took < 5, took
    assert 'status="408"' in metrics(port)
    still_serves(port)


def test_a_stalled_ndjson_stream_ends_with_a_timeout_line(live_app: LiveApp) -> None:
    _, port = live_app(body_timeout_s=0.5)
    line = json.dumps(json.loads(BUNDLE)).encode() + b"\n"
    sock = raw_connection(port)
    head = HEAD(path=ASSESS, type="application/fhir+ndjson", length="Transfer-Encoding: chunked")
    sock.sendall(head.encode())
    for data in (line, line, line[:100]):  # two lines, then a third that stops halfway
        sock.sendall(f"{len(data):x}\r\n".encode() + data + b"\r\n")
        time.sleep(0.1)
    answer = read_answer(sock)  # the server ends the answer; the client never finished
    sock.close()
    assert answer.startswith(b"HTTP/1.1 200")
    body = answer.partition(b"\r\n\r\n")[2]
    lines = [json.loads(part) for part in _dechunk(body).splitlines() if part.strip()]
    assert [x["resourceType"] for x in lines] == ["Bundle", "Bundle", "OperationOutcome"]
    assert lines[2]["issue"][0]["code"] == "timeout"
    assert "line 3" in lines[2]["issue"][0]["diagnostics"]
    still_serves(port)


def test_a_stalled_first_ndjson_line_is_refused_408(live_app: LiveApp) -> None:
    _, port = live_app(body_timeout_s=0.5)
    sock = raw_connection(port)
    head = HEAD(path=ASSESS, type="application/fhir+ndjson", length="Transfer-Encoding: chunked")
    sock.sendall(head.encode() + b"10\r\n" + b'{"resourceType"' + b" \r\n")
    answer = read_answer(sock)
    sock.close()
    assert answer.startswith(b"HTTP/1.1 408")
    still_serves(port)


def test_a_body_that_keeps_coming_within_the_timeout_is_read(live_app: LiveApp) -> None:
    _, port = live_app(body_timeout_s=2.0)
    sock = raw_connection(port)
    head = HEAD(path=ASSESS, type="application/fhir+json", length=f"Content-Length: {len(BUNDLE)}")
    sock.sendall(head.encode())
    third = len(BUNDLE) // 3
    for part in (BUNDLE[:third], BUNDLE[third : 2 * third], BUNDLE[2 * third :]):
        sock.sendall(part)
        time.sleep(0.3)
    sock.shutdown(socket.SHUT_WR)
    answer = read_answer(sock)
    sock.close()
    assert answer.startswith(b"HTTP/1.1 200")


def _dechunk(body: bytes) -> bytes:
    out, rest = [], body
    while rest:
        size_line, _, rest = rest.partition(b"\r\n")
        size = int(size_line.split(b";")[0] or b"0", 16)
        if size == 0:
            break
        out.append(rest[:size])
        rest = rest[size + 2 :]
    return b"".join(out)
