"""Replays the hostile-input corpus (``corpus.py``): for each input, the status, where the
refusal is located, that nothing sent is echoed, and bounds on time and on memory.

Memory is the peak that ``tracemalloc`` sees while the answer is made (every thread: the work
threads too); time is wall time, with generous bounds (the machine is shared, and tracing
slows Python down).
"""

from __future__ import annotations

import asyncio
import json
import time
import tracemalloc
from collections.abc import Iterator
from typing import Any

import hl7  # type: ignore[import-untyped]
import pytest
from cryptography.hazmat.primitives.asymmetric import rsa
from jwt.algorithms import RSAAlgorithm

from service.api import create_app
from service.config import ServerSettings, Settings
from service.hl7v2.mllp import frame
from service.runtime import Runtime
from tests.api.conftest import TestClient
from tests.hl7v2.test_mllp import good, listener, read_reply

from .corpus import CASES, MARKER, Case

MIB = 1024 * 1024


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load(Settings())


@pytest.fixture(scope="module")
def client(runtime: Runtime) -> Iterator[TestClient]:
    with TestClient(create_app(Settings(), ServerSettings(), runtime=runtime)) as test_client:
        yield test_client


@pytest.fixture(scope="module")
def secured(runtime: Runtime) -> Iterator[TestClient]:
    key = rsa.generate_private_key(public_exponent=65537, key_size=2048)
    jwk = json.loads(RSAAlgorithm.to_jwk(key.public_key())) | {"kid": "k"}
    server = ServerSettings(jwt_jwks=json.dumps({"keys": [jwk]}), jwt_issuer="x", jwt_audience="y")
    with TestClient(create_app(Settings(), server, runtime=runtime)) as test_client:
        yield test_client


def located_http(case: Case, body: bytes) -> list[str]:
    """Every expression and HTTP location of the OperationOutcome(s) answered (NDJSON: of
    every line). An HTTP location is never an expression (it is not FHIRPath)."""
    texts = body.splitlines() if case.transport == "ndjson" else [body]
    found: list[str] = []
    for text in texts:
        data = json.loads(text)
        if data.get("resourceType") == "OperationOutcome":
            for issue in data["issue"]:
                expressions = issue.get("expression", [])
                assert not [e for e in expressions if e.startswith("http.")], issue
                found += expressions + issue.get("location", [])
    return found


def ack_of(body: bytes) -> tuple[str, list[str]]:
    """MSA-1 and every ERR-2 of an ACK."""
    reply = hl7.parse(body.decode().replace("\n", "\r"))
    errs = [str(segment[2]) for segment in reply if str(segment[0]) == "ERR" and len(segment) > 2]
    return str(reply["MSA.F1"]), errs


def answer_http(case: Case, client: TestClient, secured: TestClient) -> tuple[int, bytes]:
    body = case.body()
    if case.transport == "jwt":
        headers = {"Authorization": "Bearer " + body.decode()}
        response = secured.get("/metrics", headers=headers)
    else:
        path = "/hl7v2" if case.transport == "hl7v2" else case.path
        response = client.request(
            case.method, path, content=body, headers=case.headers, params=case.params
        )
    return response.status_code, response.content


def answer_mllp(case: Case, runtime: Runtime) -> bytes:
    payload = case.body()

    async def scenario() -> bytes:
        async with listener(runtime) as port:
            reader, writer = await asyncio.open_connection("127.0.0.1", port)
            writer.write(frame(payload) + frame(good("AFTER-HOSTILE")))
            first: Any = None
            while True:
                reply = await read_reply(reader)
                first = first if first is not None else reply
                if str(reply["MSA.F2"]) == "AFTER-HOSTILE":
                    assert str(reply["MSA.F1"]) == "AA"  # the connection still works
                    break
            writer.close()
            return str(first).replace("\r", "\n").encode()

    return asyncio.run(asyncio.wait_for(scenario(), 60))


@pytest.mark.parametrize("case", CASES, ids=[case.name for case in CASES])
def test_each_hostile_input_is_answered_located_within_its_bounds(
    case: Case, runtime: Runtime, client: TestClient, secured: TestClient
) -> None:
    tracemalloc.start()
    started = time.perf_counter()
    try:
        if case.transport == "mllp":
            status, body = 0, answer_mllp(case, runtime)
        else:
            status, body = answer_http(case, client, secured)
        seconds = time.perf_counter() - started
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert status == case.status, body[:500]
    assert MARKER.encode() not in body  # nothing sent is repeated
    if case.ack is not None:
        ack, errs = ack_of(body)
        assert ack == case.ack, body[:500]
        if case.where is not None:
            assert case.where in errs, errs
    elif case.status >= 400 or case.transport == "ndjson":
        found = located_http(case, body)
        if case.where == "":  # the body as a whole: nothing in it to name
            assert found == [], found
        elif case.where is not None:
            assert case.where in found, found
    assert seconds < case.seconds, f"{seconds:.2f} s"
    assert peak < case.mebibytes * MIB, f"{peak / MIB:.1f} MiB"
