"""The MLLP listener's budgets: peers at once, bytes of unfinished frames held by all peers.

Before: 200 peers each holding an unfinished 1 MB frame took the process from 86 to 371 MB
(282 MB after they left), and 300 idle peers used every file descriptor the process had, so
HTTP ``/healthz`` failed in the same process, with nothing logged.
"""

from __future__ import annotations

import asyncio
import socket
import time
import urllib.request
from collections import Counter

import pytest

from service.api import create_app
from service.config import ServerSettings, Settings
from service.hl7v2.mllp import MllpHooks, MllpLimits, frame
from service.runtime import Runtime
from tests.api.live import LiveServer
from tests.api.test_serve import free_port

from .builders import message, nte_padding, obr, obx
from .test_mllp import connect, good, listener, msa, read_reply, still_answers


def test_peers_over_the_connection_limit_are_refused_counted_and_logged(
    runtime: Runtime, caplog: pytest.LogCaptureFixture
) -> None:
    counted: Counter[str] = Counter()
    open_now: list[int] = []
    hooks = MllpHooks(
        message=lambda ack: counted.update([ack]),
        connections=open_now.append,
        refused=lambda why: counted.update([why]),
    )

    async def scenario() -> None:
        async with listener(runtime, hooks=hooks, max_connections=5) as port:
            peers = [await connect(port) for _ in range(5)]
            await asyncio.sleep(0.2)
            extra_reader, extra_writer = await connect(port)
            assert await asyncio.wait_for(extra_reader.read(), 5) == b""  # closed at once
            extra_writer.close()
            reader, writer = peers[0]
            writer.write(frame(good("STILL-SERVED")))
            assert msa(await read_reply(reader)) == ("AA", "STILL-SERVED")
            for _, writer in peers:
                writer.close()
            await asyncio.sleep(0.2)
            await still_answers(port, "AFTER-CLOSE")  # room again once peers left

    asyncio.run(asyncio.wait_for(scenario(), 60))
    assert counted["connections"] == 1 and counted["AA"] == 2
    assert max(open_now) == 5 and open_now[-1] == 0
    refusals = [r.getMessage() for r in caplog.records if "refused" in r.getMessage()]
    assert refusals and "OXYRULE_MLLP_MAX_CONNECTIONS" in refusals[0]


def test_unfinished_frames_share_one_budget_and_the_frame_over_it_is_refused_ar(
    runtime: Runtime,
) -> None:
    refused: list[str] = []
    hooks = MllpHooks(refused=refused.append)
    padded = message(obr(), obx(1, "2703-7", "62"), nte_padding(40_000)).encode()
    assert 40_000 < len(padded) < 48_000

    async def scenario() -> None:
        async with listener(
            runtime, hooks=hooks, max_frame_bytes=65_536, max_buffered_bytes=65_536
        ) as port:
            first_reader, first = await connect(port)
            second_reader, second = await connect(port)
            first.write(b"\x0b" + padded[:30_000])  # held: 30 kB of 64 kB
            await first.drain()
            await asyncio.sleep(0.2)
            second.write(b"\x0b" + padded[:40_000])  # 40 kB more: no room
            await second.drain()
            await asyncio.sleep(0.2)
            second.write(padded[40_000:] + b"\x1c\r")
            reply = await read_reply(second_reader)
            assert str(reply["MSA.F1"]) == "AR"
            err = reply.segment("ERR")
            assert str(err[3][0][0]) == "207"  # the server's condition, not the message's
            assert "OXYRULE_MLLP_MAX_BUFFERED_BYTES" in str(err[8])
            first.write(padded[30_000:] + b"\x1c\r")  # the first frame was held: assessed
            assert str((await read_reply(first_reader))["MSA.F1"]) == "AA"
            second.close()
            first.close()

    asyncio.run(asyncio.wait_for(scenario(), 60))
    assert refused == ["buffered-bytes"]


def test_a_peer_that_leaves_mid_frame_gives_back_what_it_held(runtime: Runtime) -> None:
    async def scenario() -> None:
        async with listener(runtime, max_frame_bytes=65_536, max_buffered_bytes=65_536) as port:
            for _ in range(5):  # 5 × 50 kB would not fit if nothing were given back
                _, writer = await connect(port)
                writer.write(b"\x0b" + b"x" * 50_000)
                await writer.drain()
                await asyncio.sleep(0.1)
                writer.close()
                await asyncio.sleep(0.1)
            reader, writer = await connect(port)
            writer.write(b"\x0b" + b"x" * 50_000 + b"\x1c\r")
            reply = await read_reply(reader)
            err = reply.segment("ERR")
            assert str(err[3][0][0]) == "100"  # not a message: but not refused for room
            writer.close()

    asyncio.run(asyncio.wait_for(scenario(), 60))


def test_limits_must_let_one_frame_fit_the_budget() -> None:
    with pytest.raises(ValueError, match="max_frame_bytes <= max_buffered_bytes"):
        MllpLimits(max_frame_bytes=2048, max_buffered_bytes=1024)


def test_http_keeps_answering_while_idle_mllp_peers_crowd_the_listener(
    runtime: Runtime, caplog: pytest.LogCaptureFixture
) -> None:
    # The app as `oxyrule serve --mllp-port` runs it, on a real server, with 60 idle peers
    # against a cap of 20: the extra peers are refused and logged, /healthz and /metrics
    # answer, MLLP still takes messages on the peers it kept.
    mllp_port = free_port()
    server = ServerSettings(mllp_port=mllp_port, mllp_max_connections=20)
    app = create_app(Settings(), server, runtime=runtime)
    peers: list[socket.socket] = []
    with LiveServer(app) as live:
        try:
            peers += [socket.create_connection(("127.0.0.1", mllp_port)) for _ in range(60)]
            time.sleep(0.5)
            started = time.monotonic()
            with urllib.request.urlopen(f"{live.url}/healthz", timeout=2) as answer:
                assert answer.status == 200
            assert time.monotonic() - started < 2
            peers[0].sendall(frame(good("KEPT-PEER")))
            peers[0].settimeout(20)
            reply = b""
            while not reply.endswith(b"\x1c\r"):
                chunk = peers[0].recv(65536)
                assert chunk
                reply += chunk
            assert b"MSA|AA|KEPT-PEER" in reply
            with urllib.request.urlopen(f"{live.url}/metrics", timeout=5) as answer:
                metrics = answer.read().decode()
        finally:
            for peer in peers:
                peer.close()
    assert 'oxyrule_mllp_refused_total{reason="connections"} 40' in metrics
    assert 'oxyrule_hl7v2_messages_total{transport="mllp",ack="AA"} 1' in metrics
    assert "oxyrule_mllp_connections 20" in metrics
    refusals = [r for r in caplog.records if "refused" in r.getMessage()]
    assert refusals and refusals[0].levelname == "WARNING"
