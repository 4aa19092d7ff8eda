"""Splitting an NDJSON stream into numbered lines within the per-line limit."""

from __future__ import annotations

import asyncio
from collections.abc import AsyncIterator

from hypothesis import given
from hypothesis import strategies as st

from service.api.body import Line, ndjson_lines


async def _chunks(parts: list[bytes]) -> AsyncIterator[bytes]:
    for part in parts:
        yield part


def split(parts: list[bytes], limit: int = 10) -> list[tuple[int, bytes | None]]:
    async def collect() -> list[Line]:
        return [line async for line in ndjson_lines(_chunks(parts), limit)]

    return [(line.number, line.data) for line in asyncio.run(collect())]


def test_lines_are_numbered_as_an_editor_numbers_them() -> None:
    assert split([b'{"a":1}\n\n  \n{"b":2}\n']) == [(1, b'{"a":1}'), (4, b'{"b":2}')]


def test_a_last_line_without_a_newline_counts() -> None:
    assert split([b"one\ntwo"]) == [(1, b"one"), (2, b"two")]


def test_lines_may_cross_chunk_boundaries() -> None:
    assert split([b"on", b"e\nt", b"wo\n", b"\nthr", b"ee"]) == [
        (1, b"one"),
        (2, b"two"),
        (4, b"three"),
    ]


def test_a_line_over_the_limit_is_reported_and_dropped() -> None:
    assert split([b"short\n", b"x" * 25, b"x" * 25, b"\nok\n"], limit=10) == [
        (1, b"short"),
        (2, None),
        (3, b"ok"),
    ]
    assert split([b"x" * 11 + b"\nok"], limit=10) == [(1, None), (2, b"ok")]
    assert split([b"ok\n" + b"y" * 30], limit=10) == [(1, b"ok"), (2, None)]


@given(
    st.lists(st.binary(max_size=30).map(lambda b: b.replace(b"\n", b"")), max_size=12),
    st.integers(min_value=1, max_value=40),
    st.integers(min_value=1, max_value=17),
)
def test_splitting_matches_a_plain_split_whatever_the_chunks(
    lines: list[bytes], limit: int, chunk: int
) -> None:
    body = b"\n".join(lines)
    parts = [body[i : i + chunk] for i in range(0, len(body), chunk)]
    expected = [
        (n, line if len(line) <= limit else None)
        for n, line in enumerate(body.split(b"\n"), start=1)
        if line.strip() or len(line) > limit
    ]
    assert split(parts, limit) == expected
