"""Reading a request body within the size limit, as one Bundle or as NDJSON lines.

A Bundle body is refused with 413 from its ``Content-Length`` before anything is read, and
again while it streams in (a chunked upload has no length), so no more than the limit plus
one chunk is ever held. An NDJSON body as a whole is not limited (by design): it is split
into lines as it arrives, and only a line longer than the limit is refused, by answering that
line with an OperationOutcome while its bytes are skipped.

Uvicorn has no timeout on reading a body, so a client that sends its body slowly (a few bytes
now and then, slowloris-style) would hold a connection and a concurrency slot for ever. The
body must therefore arrive within ``OXYRULE_BODY_TIMEOUT_S`` (a Bundle or an HL7 v2 message:
the whole body; NDJSON, whose length is not limited: each line, counting only the time spent
waiting for its bytes). Past that the request is refused with 408 and the connection closed.
"""

from __future__ import annotations

import asyncio
from collections.abc import AsyncIterator
from dataclasses import dataclass

from starlette.requests import Request

from service.api.errors import ApiError


def _too_large(limit: int, expression: str) -> ApiError:
    return ApiError.issue(
        413,
        "too-long",
        f"the body is larger than the limit of {limit} bytes (setting OXYRULE_MAX_BODY_BYTES)",
        expression,
        headers={"Connection": "close"},
    )


def too_slow(timeout_s: float, what: str = "the body", expression: str = "Bundle") -> ApiError:
    """The 408 refusal of a body (or NDJSON line) that did not arrive within the timeout."""
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


async def read_bounded(
    request: Request, limit: int, timeout_s: float, expression: str = "Bundle"
) -> bytes:
    """The whole body, refused with 413 as soon as it is known to exceed ``limit`` bytes, and
    with 408 when it has not all arrived ``timeout_s`` seconds after the first read; the
    refusal locates the body at ``expression`` (the resource or document it should hold)."""
    length = declared_length(request)
    if length is not None and length > limit:
        raise _too_large(limit, "http.Content-Length")
    chunks: list[bytes] = []
    size = 0
    try:
        async with asyncio.timeout(timeout_s):
            async for chunk in request.stream():
                size += len(chunk)
                if size > limit:
                    raise _too_large(limit, expression)
                chunks.append(chunk)
    except TimeoutError:
        raise too_slow(timeout_s, expression=expression) from None
    return b"".join(chunks)


@dataclass(frozen=True, slots=True)
class Line:
    """One non-blank NDJSON line: its 1-based number, and its bytes (None: over the limit)."""

    number: int
    data: bytes | None


async def _timed(
    chunks: AsyncIterator[bytes], budget_s: float | None
) -> tuple[bytes | None, float]:
    """The next chunk (None at the end) and the seconds spent waiting for it, or ``TimeoutError``
    when it takes more than ``budget_s``."""
    loop = asyncio.get_running_loop()
    started = loop.time()
    async with asyncio.timeout(budget_s):
        chunk = await anext(chunks, None)
    return chunk, loop.time() - started


async def ndjson_lines(
    chunks: AsyncIterator[bytes], limit: int, timeout_s: float | None = None
) -> AsyncIterator[Line]:
    """Non-blank lines of an NDJSON stream, numbered as an editor numbers them.

    A line longer than ``limit`` bytes is yielded with ``data=None`` and its bytes are dropped
    as they arrive, so memory stays within the limit plus one chunk. A line whose bytes took
    more than ``timeout_s`` seconds (None: no limit) of waiting to arrive raises a 408
    ``ApiError`` (the time the consumer spends between lines is not counted).
    """
    number = 0
    pending = bytearray()
    skipping = False  # inside a line already known to be too long
    waited = 0.0  # seconds spent waiting for the bytes of the current line
    while True:
        try:
            chunk, seconds = await _timed(chunks, None if timeout_s is None else timeout_s - waited)
        except TimeoutError:
            assert timeout_s is not None
            raise too_slow(timeout_s, f"line {number + 1} of the body") from None
        if chunk is None:
            break
        waited += seconds
        start = 0
        while (end := chunk.find(b"\n", start)) != -1:
            number += 1
            waited = 0.0
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
