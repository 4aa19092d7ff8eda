"""The streamed NDJSON answer: each input line assessed and answered as it arrives, in order.

The answer is an ASGI response that reads the request's remaining lines itself, so input and
output stream together and memory stays bounded whatever the body's length. Each line gets one
output line: a result Bundle, or an OperationOutcome naming the line (``service.batch.answer``,
the same as the CLI). A line over the size limit is answered with a ``too-long`` issue; a line
that breaks the service unexpectedly with an ``exception`` issue and the correlation id.

Reading and answering are two tasks. The reader takes lines ahead of the answers, up to
``OXYRULE_NDJSON_READ_AHEAD_BYTES`` per request (and within the process's budget of buffered
bytes), so an ordinary client that sends its whole body before it reads anything (Python's
``http.client``, httpx) is not deadlocked: the server keeps reading while its answers wait in
the socket. (Before, the server stopped reading as soon as the client stopped taking answers,
and a 9 MB upload hung both sides for ever.) A body larger than the read-ahead needs a client
that reads while it sends; with one that does not, nothing can move, and after
``OXYRULE_BODY_TIMEOUT_S`` without a byte moving either way the connection is closed and the
log line says so (``stream``: ``client-not-reading``), with the number of lines answered.

When the rest of the body stops arriving (the pace of ``service.api.body.Pace``), the answer
ends with a ``timeout`` OperationOutcome line instead of hanging. Every way the stream can end
is in the request's log line (``stream``): ``complete``, ``client-gone``, ``body-timeout``,
``client-not-reading``.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import time
from collections.abc import AsyncIterator, Callable
from dataclasses import dataclass, field

import orjson
from starlette.background import BackgroundTask
from starlette.requests import ClientDisconnect
from starlette.responses import Response
from starlette.types import Message, Receive, Scope, Send

from service.api.answers import Answered, answer_line
from service.api.body import Line, Pace
from service.api.errors import ApiError, outcome
from service.api.logs import REQUEST_LOGGER
from service.api.middleware import frames
from service.api.protocol import CONNECTION
from service.api.sending import abort, send_within
from service.api.state import RequestRecord, ServiceState
from service.api.tally import Tally
from service.assess.presentation import PressureUnit

log = logging.getLogger(REQUEST_LOGGER)


@dataclass(slots=True)
class _ReadAhead:
    """Lines read and not yet answered, bounded in bytes per request and in the process."""

    limit: int
    queue: asyncio.Queue[Line | BaseException | None] = field(default_factory=asyncio.Queue)
    held: int = 0
    room: asyncio.Event = field(default_factory=asyncio.Event)

    async def wait_for_room(self, size: int) -> None:
        while self.held and self.held + size > self.limit:
            self.room.clear()
            await self.room.wait()

    def answered(self, size: int) -> None:
        self.held -= size
        self.room.set()


def _size(line: Line) -> int:
    return len(line.data) if line.data is not None else 0


class NdjsonAnswer(Response):
    """One output line per input line, streamed; see the module docstring."""

    def __init__(
        self,
        first: Line,
        rest: AsyncIterator[Line],
        *,
        service: ServiceState,
        record: RequestRecord,
        pace: Pace,
        unit: PressureUnit | None,
        media_type: str,
        on_line: Callable[[Tally], None],
        headers: dict[str, str] | None = None,
    ) -> None:
        self.status_code = 200
        self.media_type = media_type
        self.background: BackgroundTask | None = None
        self.init_headers(headers)
        self.first, self.rest, self.pace = first, rest, pace
        self.service, self.record, self.unit, self.on_line = service, record, unit, on_line
        self.runtime = service.runtime  # one rule set for the whole stream
        self.last_sent = time.monotonic()

    async def _answer(self, line: Line) -> bytes:
        server = self.service.server
        try:
            answered: Answered = await self.service.work.run_heavy(
                _size(line),
                answer_line,
                self.runtime,
                line,
                self.unit,
                self.service.read_limits,
                server.max_body_bytes,
            )
        except Exception as exc:  # one broken line must not end the others' answers
            log.error(
                "internal error",
                extra={
                    "correlation_id": self.record.correlation_id,
                    "error_type": type(exc).__name__,
                    "frames": frames(exc),
                },
            )
            self.on_line(Tally(None, rejected_code="exception"))
            return orjson.dumps(
                outcome(
                    "exception",
                    f"line {line.number}: internal error; quote correlation id "
                    f"{self.record.correlation_id}",
                )
            )
        self.on_line(answered.tally)
        return answered.body

    async def _read(self, ahead: _ReadAhead) -> None:
        """Put every remaining line (then None, or the exception that ended the body) in
        ``ahead.queue``, waiting for room when the answers lag."""
        budget = self.service.budget
        try:
            async for line in self.rest:
                size = _size(line)
                await ahead.wait_for_room(size)
                await budget.take(size)
                ahead.held += size
                await ahead.queue.put(line)
        except (ApiError, ClientDisconnect) as exc:
            await ahead.queue.put(exc)
        else:
            await ahead.queue.put(None)

    async def _send(self, send: Send, message: Message) -> bool:
        """Send, unless nothing moves either way for the body timeout: False then."""
        sent = await send_within(
            send,
            message,
            self.service.server.body_timeout_s,
            lambda: max(self.last_sent, self.pace.last_bytes_at),
        )
        if sent:
            self.last_sent = time.monotonic()
        return sent

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        budget = self.service.budget
        ahead = _ReadAhead(self.service.server.ndjson_read_ahead_bytes)
        await budget.take(_size(self.first))
        ahead.held = _size(self.first)
        reader = asyncio.create_task(self._read(ahead))
        self.record.stream = "complete"
        try:
            await send({"type": "http.response.start", "status": 200, "headers": self.raw_headers})
            item: Line | BaseException | None = self.first
            while isinstance(item, Line):
                body = await self._answer(item) + b"\n"
                ahead.answered(_size(item))
                budget.give(_size(item))
                more = {"type": "http.response.body", "body": body, "more_body": True}
                if not await self._send(send, more):
                    await self._abort(scope, "client-not-reading")
                    return
                item = await ahead.queue.get()
            if isinstance(item, ClientDisconnect):
                self.record.stream = "client-gone"  # the caller left: nobody to answer
                return
            if isinstance(item, ApiError):  # the rest of the body came too slowly: say so, stop
                self.record.stream = "body-timeout"
                self.on_line(Tally(None, rejected_code="timeout"))
                body = orjson.dumps(item.body) + b"\n"
                last = {"type": "http.response.body", "body": body, "more_body": False}
            else:
                last = {"type": "http.response.body", "body": b"", "more_body": False}
            if not await self._send(send, last):
                await self._abort(scope, "client-not-reading")
            elif self.record.stream == "body-timeout":
                # The rest of the body is not wanted: close once the last line is out.
                connection = scope.get("extensions", {}).get(CONNECTION)
                if connection is not None:
                    connection.close()
        finally:
            reader.cancel()
            with contextlib.suppress(BaseException):
                await reader
            while not ahead.queue.empty():  # lines read and never answered
                leftover = ahead.queue.get_nowait()
                if isinstance(leftover, Line):
                    budget.give(_size(leftover))

    async def _abort(self, scope: Scope, why: str) -> None:
        """Close the connection at once (its answers are not being read): a reset, since a
        plain close would wait for ever for the unread answers to drain."""
        self.record.stream = why
        await abort(scope)
