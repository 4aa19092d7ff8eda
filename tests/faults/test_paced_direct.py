"""An answer whose connection has nothing waiting is sent without the watch of a stalled
client (``service.api.sending``): the watch (a task and a timed wait per piece) is needed only
when a send can wait, which it cannot while the transport's buffer is empty (uvicorn pauses
writing only above the buffer's high-water mark, and a piece is at most that: ``CHUNK``)."""

from __future__ import annotations

import asyncio

from starlette.types import Message

from service.api.protocol import CONNECTION, Connection
from service.api.sending import CHUNK, PacedResponse
from service.api.state import RequestRecord


class Transport:
    """The two questions ``Connection.drained`` asks of an asyncio transport."""

    def __init__(self, waiting: int) -> None:
        self.waiting = waiting

    def is_closing(self) -> bool:
        return False

    def get_write_buffer_size(self) -> int:
        return self.waiting


def tasks_of_each_send(waiting: int, size: int) -> tuple[list[bool], bytes]:
    """For each message sent: whether it was sent from the response's own task; and the
    body received whole."""
    same_task: list[bool] = []
    received = bytearray()

    async def scenario() -> None:
        own = asyncio.current_task()

        async def send(message: Message) -> None:
            same_task.append(asyncio.current_task() is own)
            received.extend(message.get("body", b""))

        async def receive() -> Message:
            return {"type": "http.disconnect"}

        record = RequestRecord("c0ffee", "POST", "/fhir/$assess-hypoxaemia")
        response = PacedResponse(
            bytes(range(256)) * (size // 256),
            200,
            media_type="application/fhir+json",
            record=record,
            timeout_s=1.0,
        )
        connection = Connection(Transport(waiting))  # type: ignore[arg-type]
        await response({"type": "http", "extensions": {CONNECTION: connection}}, receive, send)

    asyncio.run(scenario())
    return same_task, bytes(received)


def test_with_nothing_waiting_each_piece_is_sent_directly_and_whole() -> None:
    same_task, body = tasks_of_each_send(waiting=0, size=CHUNK * 2 + 512)
    assert same_task == [True, True, True, True]  # the start and three pieces
    assert body == bytes(range(256)) * ((CHUNK * 2 + 512) // 256)


def test_with_bytes_waiting_each_piece_is_sent_under_the_watch() -> None:
    same_task, body = tasks_of_each_send(waiting=1, size=CHUNK + 256)
    assert same_task == [True, False, False]  # the start directly; the pieces watched
    assert body == bytes(range(256)) * ((CHUNK + 256) // 256)
