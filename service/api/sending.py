"""Sending an answer to a client that may not read it.

Uvicorn writes whatever the app sends into the connection's buffer and lets the app go on;
an answer the client does not read then stays in memory as long as the connection lives, and
nothing bounds how many such connections there are (16 clients that sent Bundles and never
read pushed a worker from 132 MB to 988 MB). So answers are sent in ``CHUNK`` pieces, each
only once the one before has left the buffer: the request keeps its place among the
assessments in flight (``OXYRULE_MAX_CONCURRENT_REQUESTS``) while its client does not read,
so at most that many answers wait in memory, and after ``OXYRULE_BODY_TIMEOUT_S`` without a
byte taken the connection is reset (``Connection.abort``) and the answer dropped. The log
line says so (``stream``: ``client-not-reading``).
"""

from __future__ import annotations

import asyncio
import contextlib
import time
from collections.abc import Callable, Mapping

from starlette.background import BackgroundTask
from starlette.responses import Response
from starlette.types import Message, Receive, Scope, Send

from service.api.protocol import CONNECTION, Connection
from service.api.state import RequestRecord

CHUNK = 64 * 1024  # uvicorn's high-water mark: one piece fills the buffer, no more


async def send_within(
    send: Send, message: Message, timeout_s: float, last_progress: Callable[[], float]
) -> bool:
    """Send ``message``, unless nothing moves for ``timeout_s`` (``last_progress`` gives the
    monotonic time anything last moved, either way): then give up, False."""
    sending = asyncio.ensure_future(send(message))
    while True:
        idle = time.monotonic() - last_progress()
        done, _ = await asyncio.wait({sending}, timeout=max(timeout_s - idle, 0.0) + 0.01)
        if done:
            sending.result()
            return True
        if time.monotonic() - last_progress() >= timeout_s:
            sending.cancel()
            with contextlib.suppress(BaseException):
                await sending
            return False


async def abort(scope: Scope) -> None:
    """Reset the connection now (a plain close would wait for ever for the unread answer)."""
    connection = scope.get("extensions", {}).get(CONNECTION)
    if connection is not None:
        connection.abort()
        await asyncio.sleep(0)  # let the server see the connection gone before the app returns


class PacedResponse(Response):
    """An answer sent in pieces, each once the one before has gone; see the module docstring."""

    def __init__(
        self,
        content: bytes,
        status_code: int,
        *,
        media_type: str,
        record: RequestRecord,
        timeout_s: float,
        headers: Mapping[str, str] | None = None,
    ) -> None:
        super().__init__(content, status_code, dict(headers or {}), media_type=media_type)
        self.record, self.timeout_s = record, timeout_s
        self.background: BackgroundTask | None = None

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        body = bytes(self.body)
        moved = time.monotonic()

        def last_progress() -> float:
            return moved

        connection = scope.get("extensions", {}).get(CONNECTION)
        start = {"type": "http.response.start", "status": self.status_code}
        await send(start | {"headers": self.raw_headers})
        for offset in range(0, max(len(body), 1), CHUNK):
            piece = body[offset : offset + CHUNK]
            more = offset + CHUNK < len(body)
            message = {"type": "http.response.body", "body": piece, "more_body": more}
            if isinstance(connection, Connection) and connection.drained():
                # Nothing is waiting ahead of this piece, so sending it cannot wait: sent
                # directly, without the watch (a task and a timed wait, ~40 µs a request).
                await send(message)
            elif not await send_within(send, message, self.timeout_s, last_progress):
                self.record.stream = "client-not-reading"
                await abort(scope)
                return
            moved = time.monotonic()
