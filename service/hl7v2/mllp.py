"""The MLLP listener: HL7 v2 over TCP, answered with an ACK per message (HL7 MLLP, release 2).

An asyncio server; each connection has its own ``FrameDecoder``, so frames may arrive cut
anywhere and several in one write. Each complete frame is assessed by ``handle_v2`` in a
worker thread (the event loop keeps serving other connections meanwhile) and answered, in
order, with an ACK only once the message has been processed. A frame that cannot be used
(larger than ``max_frame_bytes``, or cut short by a new start block) is answered AR naming the
reason, and the connection goes on. A connection idle for ``idle_timeout_s`` is closed, and so
is one whose client stops reading our answers for as long (reset, its unread answers dropped,
so that it holds neither a task nor a buffer). Nothing a client sends can stop
the listener or touch another connection: every failure ends at most its own connection.

MLLP has no security of its own: run it on a private network, a VPN or behind a TLS tunnel.
Logs name the peer address, sizes and ACK codes, never a message's content.
"""

from __future__ import annotations

import asyncio
import contextlib
import functools
import logging
from collections.abc import Callable

from service.hl7v2.errors import ErrorCode, V2Error
from service.hl7v2.framing import BrokenFrame, Frame, FrameDecoder
from service.hl7v2.handle import handle_v2, refusal
from service.hl7v2.message import END_BLOCK, START_BLOCK, read_header, v2_text
from service.runtime import Runtime

DEFAULT_PORT = 2575  # the port registered for HL7 with IANA
DEFAULT_MAX_FRAME_BYTES = 1024 * 1024  # a blood-gas ORU^R01 is a few kB
DEFAULT_IDLE_TIMEOUT_S = 300.0
READ_SIZE = 64 * 1024

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
    header = read_header(_text(event.head)) if event.head.startswith(b"MSH") else None
    return refusal(header, "AR", [V2Error(None, code, event.reason)], "ack").body


class _Connection:
    """One client connection: read, decode, answer, until EOF, idle timeout or failure."""

    def __init__(
        self,
        reader: asyncio.StreamReader,
        writer: asyncio.StreamWriter,
        runtime: Callable[[], Runtime],
        max_frame_bytes: int,
        idle_timeout_s: float,
    ) -> None:
        self.reader, self.writer, self.runtime = reader, writer, runtime
        self.decoder = FrameDecoder(max_frame_bytes)
        self.idle_timeout_s = idle_timeout_s
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
        if isinstance(event, Frame):
            handle = functools.partial(handle_v2, _text(event.payload), self.runtime())
            response = await asyncio.get_running_loop().run_in_executor(None, handle)
            body, code = response.body, response.ack_code
        else:
            body, code = _broken_answer(event), "AR"
            log.warning("%s: %s", self.peer, event.reason)
        self.writer.write(frame(body))
        await asyncio.wait_for(self.writer.drain(), self.idle_timeout_s)
        log.debug("%s: answered %s", self.peer, code)


async def start_mllp(
    runtime: RuntimeSource,
    host: str,
    port: int,
    *,
    max_frame_bytes: int = DEFAULT_MAX_FRAME_BYTES,
    idle_timeout_s: float = DEFAULT_IDLE_TIMEOUT_S,
) -> asyncio.Server:
    """Start listening (port 0: any free port) and return the server, already serving.

    For running beside another asyncio server (e.g. in the HTTP app's lifespan); close it
    with ``server.close()`` and ``await server.wait_closed()``. ``runtime`` may be a function
    that gives the current runtime (see ``RuntimeSource``).
    """
    if idle_timeout_s <= 0:
        raise ValueError("idle_timeout_s must be positive")

    current = _current(runtime)

    async def connected(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        await _Connection(reader, writer, current, max_frame_bytes, idle_timeout_s).run()

    FrameDecoder(max_frame_bytes)  # checks the limit before binding
    return await asyncio.start_server(connected, host, port)


async def serve_mllp(
    runtime: Runtime,
    host: str,
    port: int,
    *,
    max_frame_bytes: int = DEFAULT_MAX_FRAME_BYTES,
    idle_timeout_s: float = DEFAULT_IDLE_TIMEOUT_S,
) -> None:
    """Listen on ``host:port`` and answer MLLP clients until cancelled."""
    server = await start_mllp(
        runtime, host, port, max_frame_bytes=max_frame_bytes, idle_timeout_s=idle_timeout_s
    )
    bound = ", ".join(str(s.getsockname()) for s in server.sockets)
    log.info("MLLP listening on %s", bound)
    async with server:
        await server.serve_forever()


def run_mllp(
    runtime: Runtime,
    host: str,
    port: int,
    *,
    max_frame_bytes: int = DEFAULT_MAX_FRAME_BYTES,
    idle_timeout_s: float = DEFAULT_IDLE_TIMEOUT_S,
) -> None:
    """``serve_mllp`` in its own event loop, until interrupted (Ctrl-C ends it quietly)."""
    with contextlib.suppress(KeyboardInterrupt):
        asyncio.run(
            serve_mllp(
                runtime,
                host,
                port,
                max_frame_bytes=max_frame_bytes,
                idle_timeout_s=idle_timeout_s,
            )
        )
