"""The MLLP listener against real sockets on 127.0.0.1 (bounded, self-stopping tests).

Every bad pattern is followed by a good message on the same listener, which must still be
answered: a malformed frame never kills the listener or another connection.
"""

from __future__ import annotations

import asyncio
from collections.abc import AsyncIterator, Awaitable, Callable
from contextlib import asynccontextmanager
from typing import Any

import hl7  # type: ignore[import-untyped]

from service.hl7v2.mllp import MllpHooks, MllpLimits, frame, start_mllp
from service.runtime import Runtime

from .builders import fixture, message, msh, obr, obx

TIMEOUT = 20.0
GOOD = fixture("post-operative-drowsiness.hl7").encode()


def good(control: str) -> bytes:
    return message(obr(), obx(1, "2703-7", "62"), header=msh(control)).encode()


@asynccontextmanager
async def listener(
    runtime: Runtime, *, hooks: MllpHooks | None = None, **limits: Any
) -> AsyncIterator[int]:
    chosen = MllpLimits(**({"idle_timeout_s": 10.0} | limits))
    server = await start_mllp(runtime, "127.0.0.1", 0, limits=chosen, hooks=hooks)
    try:
        yield server.sockets[0].getsockname()[1]
    finally:
        server.close()
        await server.wait_closed()


async def read_reply(reader: asyncio.StreamReader) -> Any:
    data = await asyncio.wait_for(reader.readuntil(b"\x1c\r"), TIMEOUT)
    start = data.index(b"\x0b")
    return hl7.parse(data[start + 1 : -2].decode())


def msa(reply: Any) -> tuple[str, str]:
    return str(reply["MSA.F1"]), str(reply["MSA.F2"])


async def connect(port: int) -> tuple[asyncio.StreamReader, asyncio.StreamWriter]:
    return await asyncio.wait_for(asyncio.open_connection("127.0.0.1", port), TIMEOUT)


def run(runtime: Runtime, scenario: Callable[[int], Awaitable[None]], **limits: Any) -> None:
    async def main() -> None:
        async with listener(runtime, **limits) as port:
            await asyncio.wait_for(scenario(port), 60)

    asyncio.run(main())


async def still_answers(port: int, control: str = "AFTER-1") -> None:
    reader, writer = await connect(port)
    writer.write(frame(good(control)))
    assert msa(await read_reply(reader)) == ("AA", control)
    writer.close()


def test_a_message_is_answered_aa_after_processing(runtime: Runtime) -> None:
    async def scenario(port: int) -> None:
        reader, writer = await connect(port)
        writer.write(frame(GOOD))
        assert msa(await read_reply(reader)) == ("AA", "DEMO-POSTOP-0001")
        writer.close()

    run(runtime, scenario)


def test_two_messages_in_one_write_get_two_acks_in_order(runtime: Runtime) -> None:
    async def scenario(port: int) -> None:
        reader, writer = await connect(port)
        writer.write(frame(good("ONE")) + frame(good("TWO")))
        assert msa(await read_reply(reader)) == ("AA", "ONE")
        assert msa(await read_reply(reader)) == ("AA", "TWO")
        writer.close()

    run(runtime, scenario)


def test_a_frame_split_across_many_writes(runtime: Runtime) -> None:
    async def scenario(port: int) -> None:
        reader, writer = await connect(port)
        data = frame(good("SPLIT"))
        for i in range(0, len(data), 7):
            writer.write(data[i : i + 7])
            await writer.drain()
            await asyncio.sleep(0)
        assert msa(await read_reply(reader)) == ("AA", "SPLIT")
        writer.close()

    run(runtime, scenario)


def test_framed_garbage_is_answered_ar_and_the_connection_goes_on(runtime: Runtime) -> None:
    async def scenario(port: int) -> None:
        reader, writer = await connect(port)
        writer.write(b"unframed noise" + frame(b"garbage \x00\xff") + frame(good("NEXT")))
        assert msa(await read_reply(reader)) == ("AR", '""')  # MSA-2: the explicit null
        assert msa(await read_reply(reader)) == ("AA", "NEXT")
        writer.close()

    run(runtime, scenario)


def test_a_truncated_frame_is_answered_ar_with_its_control_id(runtime: Runtime) -> None:
    async def scenario(port: int) -> None:
        reader, writer = await connect(port)
        cut = good("CUT")[:-40]
        writer.write(b"\x0b" + cut + frame(good("WHOLE")))
        reply = await read_reply(reader)
        assert msa(reply) == ("AR", "CUT")
        assert "truncated" in str(reply.segment("ERR")[8])
        assert msa(await read_reply(reader)) == ("AA", "WHOLE")
        writer.close()

    run(runtime, scenario)


def test_a_5_mb_frame_is_refused_and_the_next_message_answered(runtime: Runtime) -> None:
    async def scenario(port: int) -> None:
        reader, writer = await connect(port)
        big = good("BIG")[:-1] + b"\rNTE|1|L|" + b"x" * (5 * 1024 * 1024)
        writer.write(frame(big))
        await writer.drain()
        reply = await read_reply(reader)
        assert msa(reply) == ("AR", "BIG")
        assert str(reply.segment("ERR")[3][0][0]) == "104"
        writer.write(frame(good("SMALL")))
        assert msa(await read_reply(reader)) == ("AA", "SMALL")
        writer.close()

    run(runtime, scenario, max_frame_bytes=1024 * 1024)


def test_a_client_leaving_mid_frame_harms_no_one(runtime: Runtime) -> None:
    async def scenario(port: int) -> None:
        other_reader, other_writer = await connect(port)
        _, writer = await connect(port)
        writer.write(b"\x0b" + good("LEFT")[:50])
        await writer.drain()
        writer.close()
        await writer.wait_closed()
        other_writer.write(frame(good("OTHER")))
        assert msa(await read_reply(other_reader)) == ("AA", "OTHER")
        other_writer.close()
        await still_answers(port)

    run(runtime, scenario)


def test_an_idle_connection_is_closed(runtime: Runtime) -> None:
    async def scenario(port: int) -> None:
        reader, writer = await connect(port)
        writer.write(b"\x0bMSH|")  # starts a frame, then goes quiet
        assert await asyncio.wait_for(reader.read(), TIMEOUT) == b""
        writer.close()
        await still_answers(port)

    run(runtime, scenario, idle_timeout_s=0.3)


def test_a_slow_client_does_not_hold_up_another(runtime: Runtime) -> None:
    async def scenario(port: int) -> None:
        slow_reader, slow_writer = await connect(port)
        slow_writer.write(b"\x0b" + good("SLOW")[:30])  # half a frame, left open
        await slow_writer.drain()
        for n in range(3):
            await still_answers(port, f"FAST-{n}")
        slow_writer.write(good("SLOW")[30:] + b"\x1c\r")
        assert msa(await read_reply(slow_reader)) == ("AA", "SLOW")
        slow_writer.close()

    run(runtime, scenario)
