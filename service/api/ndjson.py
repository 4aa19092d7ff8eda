"""The streamed NDJSON answer: each input line assessed and answered as it arrives, in order.

The answer is an ASGI response that reads the request's remaining lines itself, so input and
output stream together and memory stays bounded whatever the body's length. Each line gets one
output line: a result Bundle, or an OperationOutcome naming the line (``service.batch.answer``,
the same as the CLI). A line over the size limit is answered with a ``too-long`` issue; a line
that breaks the service unexpectedly with an ``exception`` issue and the correlation id. When
the rest of the body stops arriving (``OXYRULE_BODY_TIMEOUT_S`` for one line), the answer ends
with a ``timeout`` OperationOutcome line instead of hanging.
"""

from __future__ import annotations

import asyncio
import logging
from collections.abc import AsyncIterator, Callable

import orjson
from starlette.background import BackgroundTask
from starlette.requests import ClientDisconnect
from starlette.responses import Response
from starlette.types import Receive, Scope, Send

from service.api.body import Line
from service.api.errors import ApiError, outcome
from service.api.logs import REQUEST_LOGGER
from service.api.middleware import frames
from service.api.tally import Tally, tally_json
from service.assess.presentation import PressureUnit
from service.batch import answer
from service.runtime import Runtime

log = logging.getLogger(REQUEST_LOGGER)


class NdjsonAnswer(Response):
    """One output line per input line, streamed; see the module docstring."""

    def __init__(
        self,
        first: Line,
        rest: AsyncIterator[Line],
        *,
        runtime: Runtime,
        unit: PressureUnit | None,
        media_type: str,
        limit: int,
        correlation_id: str,
        on_line: Callable[[Tally], None],
        headers: dict[str, str] | None = None,
    ) -> None:
        self.status_code = 200
        self.media_type = media_type
        self.background: BackgroundTask | None = None
        self.init_headers(headers)
        self.first, self.rest = first, rest
        self.runtime, self.unit, self.limit = runtime, unit, limit
        self.correlation_id, self.on_line = correlation_id, on_line

    def _answer(self, line: Line) -> bytes:
        where = f"line {line.number}"
        if line.data is None:
            body = outcome(
                "too-long",
                f"{where}: longer than the limit of {self.limit} bytes per line "
                "(setting OXYRULE_MAX_BODY_BYTES)",
                "Bundle",
            )
            self.on_line(Tally(None, rejected_code="too-long"))
            return orjson.dumps(body)
        try:
            text, _ = answer(self.runtime, line.data, where, self.unit)
        except Exception as exc:  # one broken line must not end the others' answers
            log.error(
                "internal error",
                extra={
                    "correlation_id": self.correlation_id,
                    "error_type": type(exc).__name__,
                    "frames": frames(exc),
                },
            )
            self.on_line(Tally(None, rejected_code="exception"))
            return orjson.dumps(
                outcome(
                    "exception",
                    f"{where}: internal error; quote correlation id {self.correlation_id}",
                )
            )
        self.on_line(tally_json(text))
        return text

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        await send({"type": "http.response.start", "status": 200, "headers": self.raw_headers})
        body = self._answer(self.first) + b"\n"
        await send({"type": "http.response.body", "body": body, "more_body": True})
        try:
            async for line in self.rest:
                body = self._answer(line) + b"\n"
                await send({"type": "http.response.body", "body": body, "more_body": True})
                await asyncio.sleep(0)  # let other requests run between lines of a long stream
        except ClientDisconnect:
            return  # the caller left: nobody to answer
        except ApiError as refusal:  # the rest of the body came too slowly: say so, and stop
            self.on_line(Tally(None, rejected_code="timeout"))
            body = orjson.dumps(refusal.body) + b"\n"
            await send({"type": "http.response.body", "body": body, "more_body": False})
            return
        await send({"type": "http.response.body", "body": b"", "more_body": False})
