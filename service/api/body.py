"""Reading a request body within the size limit, as one Bundle or as NDJSON lines.

A Bundle body is refused with 413 from its ``Content-Length`` before anything is read, and
again while it streams in (a chunked upload has no length), so no more than the limit plus
one chunk is ever held. An NDJSON body as a whole is not limited (contract §1): it is split
into lines as it arrives, and only a line longer than the limit is refused, by answering that
line with an OperationOutcome while its bytes are skipped.
"""

from __future__ import annotations

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


async def read_bounded(request: Request, limit: int) -> bytes:
    """The whole body, refused with 413 as soon as it is known to exceed ``limit`` bytes."""
    length = declared_length(request)
    if length is not None and length > limit:
        raise _too_large(limit, "http.Content-Length")
    chunks: list[bytes] = []
    size = 0
    async for chunk in request.stream():
        size += len(chunk)
        if size > limit:
            raise _too_large(limit, "Bundle")
        chunks.append(chunk)
    return b"".join(chunks)


@dataclass(frozen=True, slots=True)
class Line:
    """One non-blank NDJSON line: its 1-based number, and its bytes (None: over the limit)."""

    number: int
    data: bytes | None


async def ndjson_lines(chunks: AsyncIterator[bytes], limit: int) -> AsyncIterator[Line]:
    """Non-blank lines of an NDJSON stream, numbered as an editor numbers them.

    A line longer than ``limit`` bytes is yielded with ``data=None`` and its bytes are dropped
    as they arrive, so memory stays within the limit plus one chunk.
    """
    number = 0
    pending = bytearray()
    skipping = False  # inside a line already known to be too long
    async for chunk in chunks:
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
