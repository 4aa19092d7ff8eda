"""The MLLP listener: HL7 v2 over TCP, answered with an ACK per message (HL7 MLLP, release 2).

An asyncio server; each connection has its own ``FrameDecoder``, so frames may arrive cut
anywhere and several in one write. Each complete frame is assessed by ``handle_v2`` in a
work thread (``service.work``: the event loop keeps serving other connections, and HTTP when
the listener runs inside ``oxyrule serve``) and answered, in order, with an ACK only once the
message has been processed. A frame that cannot be used (larger than the frame limit, more
than the listener's budget of buffered bytes has room for, or cut short by a new start block)
is answered AR naming the reason, and the connection goes on. A connection idle for the idle
timeout is closed, and so is one whose client stops reading our answers for as long (reset,
its unread answers dropped, so that it holds neither a task nor a buffer). Nothing a client
sends can stop the listener or touch another connection: every failure ends at most its own
connection.

Budgets (``MllpLimits``, settings ``OXYRULE_MLLP_*``): at most ``max_connections`` peers at
once (a peer beyond is closed at once, logged and counted: 300 idle peers used to exhaust the
process's file descriptors, and HTTP with them), at most ``max_buffered_bytes`` of unfinished
frames held by all peers together, each frame at most ``max_frame_bytes``, each message within
``V2Limits``.

MLLP has no security of its own: run it on a private network, a VPN or behind a TLS tunnel.
Logs name the peer address, sizes and ACK codes, never a message's content.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import time
from collections.abc import Callable
from dataclasses import dataclass, field

from service.hl7v2.errors import ErrorCode, V2Error
from service.hl7v2.framing import BrokenFrame, Frame, FrameBudget, FrameDecoder
from service.hl7v2.handle import handle_v2, refusal
from service.hl7v2.message import (
    DEFAULT_LIMITS,
    END_BLOCK,
    START_BLOCK,
    V2Limits,
    read_header,
    v2_text,
)
from service.runtime import Runtime
from service.work import WorkPool

DEFAULT_PORT = 2575  # the port registered for HL7 with IANA
READ_SIZE = 64 * 1024
REFUSAL_LOG_INTERVAL_S = 10.0  # refused peers are logged at most this often (with a count)


@dataclass(frozen=True, slots=True)
class MllpLimits:
    """The listener's budgets; see the module docstring and deploy/README.md."""

    max_frame_bytes: int = 1024 * 1024  # a blood-gas ORU^R01 is a few kB
    idle_timeout_s: float = 300.0
    max_connections: int = 100
    max_buffered_bytes: int = 16 * 1024 * 1024
    message: V2Limits = DEFAULT_LIMITS

    def __post_init__(self) -> None:
        if self.idle_timeout_s <= 0:
            raise ValueError("idle_timeout_s must be positive")
        if self.max_connections < 1 or self.max_frame_bytes > self.max_buffered_bytes:
            raise ValueError("max_connections >= 1 and max_frame_bytes <= max_buffered_bytes")


def _nothing(*_: object) -> None:
    return None


@dataclass(frozen=True, slots=True)
class MllpHooks:
    """What the listener reports, for metrics (``oxyrule serve`` counts them in /metrics)."""

    message: Callable[[str], None] = _nothing  # each answer's MSA-1
    connections: Callable[[int], None] = _nothing  # peers connected now
    refused: Callable[[str], None] = _nothing  # a peer or a frame refused for a budget: why


# The runtime to answer with, or a function giving the current one (read per message, so a
# rule-set reload by the HTTP app reaches MLLP connections too, and a message in progress
# keeps the runtime it started with).
RuntimeSource = Runtime | Callable[[], Runtime]


def _current(source: RuntimeSource) -> Callable[[], Runtime]:
    if isinstance(source, Runtime):
        return lambda: source
    return source


log = logging.getLogger("oxyrule.hl7v2.mllp")


def frame(body: bytes) -> bytes:
    """``body`` in an MLLP frame."""
    return START_BLOCK + body + END_BLOCK + b"\r"


def _text(payload: bytes) -> str:
    found = v2_text(payload)
    return found if found is not None else payload.decode("utf-8", errors="replace")


def _broken_answer(event: BrokenFrame) -> bytes:
    code = ErrorCode.VALUE_TOO_LONG if event.too_large else ErrorCode.SEGMENT_SEQUENCE
    if event.busy:
        code = ErrorCode.INTERNAL  # nothing wrong with the message: send it again later
    header = read_header(_text(event.head)) if event.head.startswith(b"MSH") else None
    return refusal(header, "AR", [V2Error(None, code, event.reason)], "ack").body


@dataclass(slots=True)
class _Listener:
    """What every connection of one listener shares."""

    runtime: Callable[[], Runtime]
    limits: MllpLimits
    work: WorkPool
    hooks: MllpHooks
    budget: FrameBudget
    open: int = 0
    refused_since_log: int = 0
    last_refusal_log: float = field(default=-REFUSAL_LOG_INTERVAL_S)

    def refuse(self, writer: asyncio.StreamWriter) -> None:
        """Close a peer over the connection limit at once (a reset frees its descriptor now),
        logged at most every ``REFUSAL_LOG_INTERVAL_S`` with how many were refused."""
        writer.transport.abort()
        self.hooks.refused("connections")
        self.refused_since_log += 1
        now = time.monotonic()
        if now - self.last_refusal_log >= REFUSAL_LOG_INTERVAL_S:
            log.warning(
                "MLLP connection refused: %d peers connected, the limit "
                "(setting OXYRULE_MLLP_MAX_CONNECTIONS); %d refused since the last such line",
                self.open,
                self.refused_since_log,
            )
            self.refused_since_log, self.last_refusal_log = 0, now


class _Connection:
    """One client connection: read, decode, answer, until EOF, idle timeout or failure."""

    def __init__(
        self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter, shared: _Listener
    ) -> None:
        self.reader, self.writer, self.shared = reader, writer, shared
        self.decoder = FrameDecoder(shared.limits.max_frame_bytes, shared.budget)
        self.idle_timeout_s = shared.limits.idle_timeout_s
        self.peer = str(writer.get_extra_info("peername"))

    async def run(self) -> None:
        log.info("MLLP connection from %s", self.peer)
        try:
            await self._serve()
        except (ConnectionError, TimeoutError) as exc:
            log.info("MLLP connection from %s ended: %s", self.peer, type(exc).__name__)
        except Exception as exc:  # one connection's trouble never reaches the listener
            log.error("MLLP connection from %s failed: %s", self.peer, type(exc).__name__)
        finally:
            self.decoder.release()
            await self._close()
        if self.decoder.discarded:
            log.warning("%s: %d bytes outside any frame dropped", self.peer, self.decoder.discarded)

    async def _close(self) -> None:
        """Close, and give up on answers the peer does not take.

        A plain close sends what is still buffered first, and waits for it: for a peer that
        has stopped reading, for ever (the connection and its buffer would stay). After the
        idle timeout the connection is aborted instead (a reset; the unread answers dropped).
        """
        self.writer.close()
        try:
            await asyncio.wait_for(self.writer.wait_closed(), self.idle_timeout_s)
        except TimeoutError:
            log.info("MLLP connection from %s not reading its answers: reset", self.peer)
            self.writer.transport.abort()
        except Exception:  # closing a connection that already failed: nothing more to do
            self.writer.transport.abort()

    async def _serve(self) -> None:
        while True:
            try:
                data = await asyncio.wait_for(self.reader.read(READ_SIZE), self.idle_timeout_s)
            except TimeoutError:
                log.info("MLLP connection from %s idle: closed", self.peer)
                return
            if not data:
                if self.decoder.in_frame:
                    log.warning(
                        "%s closed mid-frame: %d bytes dropped", self.peer, self.decoder.held
                    )
                return
            for event in self.decoder.feed(data):
                await self._answer(event)

    async def _answer(self, event: Frame | BrokenFrame) -> None:
        shared = self.shared
        if isinstance(event, Frame):
            runtime, limits = shared.runtime(), shared.limits.message
            response = await shared.work.run(
                handle_v2, _text(event.payload), runtime, limits=limits
            )
            body, code = response.body, response.ack_code
        else:
            body, code = _broken_answer(event), "AR"
            if event.busy:
                shared.hooks.refused("buffered-bytes")
            log.warning("%s: %s", self.peer, event.reason)
            await asyncio.sleep(0)  # made on the loop: let other peers in between refusals
        shared.hooks.message(code)
        if not body:  # enhanced mode asked for no acknowledgment (MSH-15/16 NE, ER, SU)
            log.debug("%s: no acknowledgment asked for", self.peer)
            return
        self.writer.write(frame(body))
        await asyncio.wait_for(self.writer.drain(), self.idle_timeout_s)
        log.debug("%s: answered %s", self.peer, code)


async def start_mllp(
    runtime: RuntimeSource,
    host: str,
    port: int,
    *,
    limits: MllpLimits | None = None,
    work: WorkPool | None = None,
    hooks: MllpHooks | None = None,
) -> asyncio.Server:
    """Start listening (port 0: any free port) and return the server, already serving.

    For running beside another asyncio server (e.g. in the HTTP app's lifespan); close it
    with ``server.close()`` and ``await server.wait_closed()``. ``runtime`` may be a function
    that gives the current runtime (see ``RuntimeSource``); ``work`` the threads to assess in
    (shared with HTTP inside ``oxyrule serve``; else one of its own, of two threads).
    """
    limits = limits or MllpLimits()
    shared = _Listener(
        _current(runtime),
        limits,
        work or WorkPool(2),
        hooks or MllpHooks(),
        FrameBudget(limits.max_buffered_bytes),
    )

    async def connected(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        if shared.open >= limits.max_connections:
            shared.refuse(writer)
            return
        shared.open += 1
        shared.hooks.connections(shared.open)
        try:
            await _Connection(reader, writer, shared).run()
        finally:
            shared.open -= 1
            shared.hooks.connections(shared.open)

    return await asyncio.start_server(connected, host, port)


async def serve_mllp(
    runtime: Runtime, host: str, port: int, *, limits: MllpLimits | None = None
) -> None:
    """Listen on ``host:port`` and answer MLLP clients until cancelled."""
    server = await start_mllp(runtime, host, port, limits=limits)
    bound = ", ".join(str(s.getsockname()) for s in server.sockets)
    log.info("MLLP listening on %s", bound)
    async with server:
        await server.serve_forever()


def run_mllp(runtime: Runtime, host: str, port: int, *, limits: MllpLimits | None = None) -> None:
    """``serve_mllp`` in its own event loop, until interrupted (Ctrl-C ends it quietly)."""
    with contextlib.suppress(KeyboardInterrupt):
        asyncio.run(serve_mllp(runtime, host, port, limits=limits))
