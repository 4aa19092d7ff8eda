"""MLLP peers that misbehave at scale, against the real listener on 127.0.0.1 (bounded tests).

Stalled peers (a frame begun and left open) are closed by the idle timeout while other peers
are answered at once; a peer that sends but never reads its ACKs is closed once its answers
have waited the idle timeout; peers that vanish mid-frame, with a FIN or a reset, harm no
one. After each, a good message on a new connection must still be answered AA.
"""

from __future__ import annotations

import asyncio
import socket
import struct
import time

from service.hl7v2.mllp import frame
from service.runtime import Runtime

from .test_mllp import TIMEOUT, connect, good, msa, read_reply, run, still_answers


def test_many_stalled_peers_are_closed_by_the_idle_timeout_and_others_answered(
    runtime: Runtime,
) -> None:
    async def scenario(port: int) -> None:
        stalled = [await connect(port) for _ in range(25)]
        for _, writer in stalled:
            writer.write(b"\x0b" + good("STALL")[:40])  # a frame begun, then silence
            await writer.drain()
        started = time.monotonic()
        for n in range(3):
            await still_answers(port, f"BUSY-{n}")
        assert time.monotonic() - started < 5  # answered while 25 peers stall
        for reader, writer in stalled:
            assert await asyncio.wait_for(reader.read(), TIMEOUT) == b""  # closed by us
            writer.close()
        await still_answers(port)

    run(runtime, scenario, idle_timeout_s=0.5)


def test_a_peer_that_never_reads_its_answers_is_reset_and_harms_no_one(
    runtime: Runtime,
) -> None:
    async def scenario(port: int) -> None:
        loop = asyncio.get_running_loop()
        sock = socket.socket()
        sock.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 4096)  # fill up quickly
        sock.setblocking(False)
        await loop.sock_connect(sock, ("127.0.0.1", port))
        # Start blocks only: each cuts the one before short and is answered AR (255 bytes):
        # 15 MB of answers, more than the socket buffers hold, and none is read for now.
        await loop.sock_sendall(sock, b"\x0bX" * 60_000)
        started = time.monotonic()
        await still_answers(port, "WHILE-BLOCKED")
        assert time.monotonic() - started < 5
        await asyncio.sleep(3)  # past the idle timeout for the blocked answers, and the close
        ended = False
        while not ended and time.monotonic() - started < TIMEOUT:
            try:  # what was buffered before the reset may still arrive; then the end
                ended = await asyncio.wait_for(loop.sock_recv(sock, 1 << 20), 2) == b""
            except ConnectionError:
                ended = True
        sock.close()
        assert ended, "the connection of a peer that does not read was left open"
        await still_answers(port)

    run(runtime, scenario, idle_timeout_s=0.5)


def test_a_peer_that_resets_mid_frame_harms_no_one(runtime: Runtime) -> None:
    async def scenario(port: int) -> None:
        other_reader, other_writer = await connect(port)
        for n in range(5):
            sock = socket.create_connection(("127.0.0.1", port), timeout=TIMEOUT)
            sock.sendall(b"\x0b" + good(f"RESET-{n}")[:60])
            sock.setsockopt(socket.SOL_SOCKET, socket.SO_LINGER, struct.pack("ii", 1, 0))
            sock.close()  # an RST, not a FIN: the peer is simply gone
        other_writer.write(frame(good("OTHER")))
        assert msa(await read_reply(other_reader)) == ("AA", "OTHER")
        other_writer.close()
        await still_answers(port)

    run(runtime, scenario)
