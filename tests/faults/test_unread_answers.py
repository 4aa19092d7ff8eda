"""Answers to clients that do not read them (``service.api.sending``).

Before: an answer was written whole into the connection's buffer and the request let go, so
16 clients that never read held every answer they were sent (a worker went from 132 MB to
988 MB, with answers of 47 MB). Now an answer is sent piece by piece while the request keeps
its place among the assessments in flight, and a client that takes nothing for the body
timeout is reset. (Answers are now small, and the kernel's socket buffers absorb a whole one
on loopback, so the pacing is tested against an ASGI peer that stops taking messages; the
load command ``tests/load/hostile.py amplification`` measures the memory of a real server.)
"""

from __future__ import annotations

import asyncio

from starlette.types import Message

from service.api.protocol import CONNECTION
from service.api.sending import CHUNK, PacedResponse
from service.api.state import RequestRecord


class Connection:
    def __init__(self) -> None:
        self.aborted = False

    def close(self) -> None:
        raise AssertionError("a client that does not read is reset, not closed")

    def abort(self) -> None:
        self.aborted = True


def test_an_answer_nobody_takes_is_dropped_after_the_timeout_and_the_connection_reset() -> None:
    sent: list[Message] = []
    connection = Connection()
    record = RequestRecord("c0ffee", "POST", "/fhir/$assess-hypoxaemia")

    async def send(message: Message) -> None:
        if len(sent) >= 3:  # the client stops reading: writing never resumes
            await asyncio.Event().wait()
        sent.append(message)

    async def receive() -> Message:
        return {"type": "http.disconnect"}

    async def scenario() -> float:
        response = PacedResponse(
            b"x" * (CHUNK * 10),
            200,
            media_type="application/fhir+json",
            record=record,
            timeout_s=0.3,
        )
        loop = asyncio.get_running_loop()
        started = loop.time()
        scope = {"type": "http", "extensions": {CONNECTION: connection}}
        await asyncio.wait_for(response(scope, receive, send), 5)
        return loop.time() - started

    took = asyncio.run(scenario())
    assert connection.aborted and record.stream == "client-not-reading"
    assert 0.25 < took < 2.0, took
    assert len(sent) == 3  # the start and two pieces; the rest was never held by uvicorn


def test_an_answer_taken_is_sent_whole_in_pieces() -> None:
    sent: list[Message] = []
    record = RequestRecord("c0ffee", "POST", "/hl7v2")

    async def send(message: Message) -> None:
        sent.append(message)

    async def receive() -> Message:
        return {"type": "http.disconnect"}

    body = bytes(range(256)) * (CHUNK // 100)
    response = PacedResponse(
        body, 200, media_type="application/hl7-v2", record=record, timeout_s=0.3
    )
    asyncio.run(response({"type": "http", "extensions": {}}, receive, send))
    pieces = [m["body"] for m in sent[1:]]
    assert b"".join(pieces) == body and max(map(len, pieces)) <= CHUNK
    assert [m["more_body"] for m in sent[1:]] == [True] * (len(pieces) - 1) + [False]
    assert record.stream is None
