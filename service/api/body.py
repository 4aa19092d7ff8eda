"""Reading a request body within its budgets, as one Bundle (or message) or as NDJSON lines.

A Bundle body is refused with 413 from its ``Content-Length`` before anything is read, and
again while it streams in (a chunked upload has no length), so no more than the limit plus
one chunk is ever held. Its bytes also count against the process's budget of buffered bytes
(``OXYRULE_MAX_BUFFERED_BYTES``, ``service.api.budget``): a body that does not fit is refused
with 429 before it is read. An NDJSON body as a whole is not limited (by design): it is
split into lines as it arrives, and only a line longer than the limit is refused, by answering
that line with an OperationOutcome while its bytes are skipped.

Uvicorn has no timeout on reading a body, so a client that sends its body slowly (a few bytes
now and then, slowloris-style) would hold a connection and a concurrency slot for ever. So a
Bundle or an HL7 v2 message must arrive whole within ``OXYRULE_BODY_TIMEOUT_S``; an NDJSON
body, whose length is not limited, gets that long as a grace and must then keep arriving at
``OXYRULE_BODY_MIN_BYTES_PER_S`` on average over the whole body (``Pace``): only the time
spent waiting for bytes counts, never the time the server spends answering. Past that the
request is refused with 408 and the connection closed. (Each newline used to restart the
timer, so a client sending one byte every 29 s held its slot for ever.)
"""

from __future__ import annotations

import asyncio
import time
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from dataclasses import dataclass, field

from starlette.requests import Request

from service.api.budget import ByteBudget
from service.api.errors import ApiError


def _too_large(limit: int, expression: str) -> ApiError:
    return ApiError.issue(
        413,
        "too-long",
        f"the body is larger than the limit of {limit} bytes (setting OXYRULE_MAX_BODY_BYTES)",
        expression,
        headers={"Connection": "close"},
    )


def busy(budget: ByteBudget) -> ApiError:
    """The 429 refusal of a body that does not fit the process's budget of buffered bytes."""
    return ApiError.issue(
        429,
        "throttled",
        f"the server holds {budget.limit} bytes of request bodies at most and has no room for "
        "this one now; retry shortly (setting OXYRULE_MAX_BUFFERED_BYTES)",
        "http.Content-Length",
        headers={"Retry-After": "1", "Connection": "close"},
    )


def too_slow(timeout_s: float, what: str = "the body", expression: str = "") -> ApiError:
    """The 408 refusal of a body that did not arrive within the timeout."""
    return ApiError.issue(
        408,
        "timeout",
        f"{what} did not arrive within {timeout_s:g} s (setting OXYRULE_BODY_TIMEOUT_S)",
        expression,
        headers={"Connection": "close"},
    )


def declared_length(request: Request) -> int | None:
    """The ``Content-Length`` header as a number, or None when absent.

    Raises:
        ApiError: 400 when the header is not a non-negative integer.
    """
    text = request.headers.get("content-length")
    if text is None:
        return None
    if not text.strip().isdigit():
        raise ApiError.issue(
            400, "invalid", "Content-Length is not a number of bytes", "http.Content-Length"
        )
    return int(text)


@asynccontextmanager
async def bounded_body(
    request: Request, limit: int, timeout_s: float, budget: ByteBudget, expression: str = ""
) -> AsyncIterator[bytearray]:
    """The whole body, held within ``budget`` until the ``with`` block ends.

    Refused with 413 as soon as it is known to exceed ``limit`` bytes, with 429 when the
    process's budget has no room for it, and with 408 when it has not all arrived ``timeout_s``
    seconds after the first read. Refusals locate the body at ``expression`` (the resource or
    document it should hold).
    """
    length = declared_length(request)
    if length is not None and length > limit:
        raise _too_large(limit, "http.Content-Length")
    held = length or 0
    if held and not budget.try_take(held):
        raise busy(budget)
    try:
        # One buffer, filled as the body comes (joining chunks would hold the body twice).
        body = bytearray()
        try:
            async with asyncio.timeout(timeout_s):
                async for chunk in request.stream():
                    size = len(body) + len(chunk)
                    if size > limit:
                        raise _too_large(limit, expression)
                    if size > held:  # no length was declared (or a wrong one): take as it comes
                        if not budget.try_take(size - held):
                            raise busy(budget)
                        held = size
                    body += chunk
        except TimeoutError:
            raise too_slow(timeout_s, expression=expression) from None
        yield body
    finally:
        budget.give(held)


@dataclass(frozen=True, slots=True)
class Line:
    """One non-blank NDJSON line: its 1-based number, and its bytes (None: over the limit)."""

    number: int
    data: bytes | None


@dataclass(slots=True)
class Pace:
    """How long an NDJSON body may keep the server waiting for its bytes.

    No single pause longer than ``grace_s``, and in all no more than ``grace_s`` plus one
    second for every ``min_bytes_per_s`` bytes received: an average rate over the whole body,
    so a line that takes a while is fine after many that came fast, but a trickle (one
    newline every few seconds) runs out. Only waiting for bytes counts.
    """

    grace_s: float
    min_bytes_per_s: float
    waited_s: float = 0.0
    received: int = 0
    last_bytes_at: float = field(default_factory=time.monotonic)

    def remaining_s(self) -> float:
        credit = self.grace_s + self.received / self.min_bytes_per_s - self.waited_s
        return min(self.grace_s, credit)

    def refusal(self, line: int) -> ApiError:
        return ApiError.issue(
            408,
            "timeout",
            f"line {line} of the body did not arrive: an NDJSON body may pause for "
            f"{self.grace_s:g} s at most and must arrive at {self.min_bytes_per_s:g} bytes/s on "
            f"average after its first {self.grace_s:g} s (settings OXYRULE_BODY_TIMEOUT_S, "
            "OXYRULE_BODY_MIN_BYTES_PER_S)",
            headers={"Connection": "close"},
        )


async def _next_chunk(chunks: AsyncIterator[bytes], pace: Pace | None) -> bytes | None:
    """The next chunk (None at the end), counting the wait in ``pace``; ``TimeoutError`` when
    the body has used up its time."""
    if pace is None:
        return await anext(chunks, None)
    started = time.monotonic()
    try:
        async with asyncio.timeout(max(pace.remaining_s(), 0.0)):
            chunk = await anext(chunks, None)
    finally:
        pace.waited_s += time.monotonic() - started
    if chunk:
        pace.received += len(chunk)
        pace.last_bytes_at = time.monotonic()
    return chunk


async def ndjson_lines(
    chunks: AsyncIterator[bytes], limit: int, pace: Pace | None = None
) -> AsyncIterator[Line]:
    """Non-blank lines of an NDJSON stream, numbered as an editor numbers them.

    A line longer than ``limit`` bytes is yielded with ``data=None`` and its bytes are dropped
    as they arrive, so memory stays within the limit plus one chunk. When the body does not
    keep its ``pace`` (None: no limit) a 408 ``ApiError`` is raised naming the line awaited
    (the time the consumer spends between lines is not counted).
    """
    number = 0
    pending = bytearray()
    skipping = False  # inside a line already known to be too long
    while True:
        try:
            chunk = await _next_chunk(chunks, pace)
        except TimeoutError:
            assert pace is not None
            raise pace.refusal(number + 1) from None
        if chunk is None:
            break
        start = 0
        while (end := chunk.find(b"\n", start)) != -1:
            number += 1
            if skipping:
                skipping = False
                yield Line(number, None)
            else:
                pending += chunk[start:end]
                if len(pending) > limit:
                    yield Line(number, None)
                elif pending.strip():
                    yield Line(number, bytes(pending))
            pending.clear()
            start = end + 1
        if not skipping:
            pending += chunk[start:]
            if len(pending) > limit:
                skipping = True
                pending.clear()
    if skipping:
        yield Line(number + 1, None)
    elif pending.strip():
        yield Line(number + 1, bytes(pending))
