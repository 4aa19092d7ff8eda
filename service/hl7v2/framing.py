"""MLLP framing, as a pure incremental decoder (HL7 MLLP transport specification, release 2).

A frame is ``0x0B`` (start block), the message, ``0x1C 0x0D`` (end block). Bytes arrive in
any cut: a frame may span many reads, one read may hold several frames. ``FrameDecoder.feed``
takes whatever arrived and returns the events it completed, in order:

* ``Frame`` — a complete message;
* ``BrokenFrame`` — a frame that cannot be used: larger than ``max_frame_bytes`` (its bytes
  are counted and dropped as they come, never held), or cut short by a new start block. It
  keeps the first bytes of the frame, so the answer can still name the MSH-10 it refuses.

Bytes outside a frame are dropped and counted (``discarded``); a CR right after an end block
is part of it. The decoder holds at most ``max_frame_bytes`` at any time.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import Enum

START, END, CR = 0x0B, 0x1C, 0x0D
HEAD_BYTES = 4096  # enough for MSH and so for MSH-10 in a refusal


@dataclass(frozen=True, slots=True)
class Frame:
    """A complete frame's message bytes (without the block characters)."""

    payload: bytes


@dataclass(frozen=True, slots=True)
class BrokenFrame:
    """A frame that cannot be used, why, and its first bytes."""

    reason: str
    head: bytes
    too_large: bool = False


class _State(Enum):
    OUTSIDE = 1
    INSIDE = 2
    OVERSIZE = 3
    AFTER_END = 4


def _non_blank(data: bytes | bytearray) -> int:
    return len(data) - sum(data.count(c) for c in (b" ", b"\r", b"\n", b"\t"))


class FrameDecoder:
    """Turns a byte stream into frames; one decoder per connection."""

    def __init__(self, max_frame_bytes: int) -> None:
        if max_frame_bytes < 1:
            raise ValueError("max_frame_bytes must be at least 1")
        self.max_frame_bytes = max_frame_bytes
        self.discarded = 0  # non-blank bytes seen outside any frame
        self._state = _State.OUTSIDE
        self._buffer = bytearray()
        self._head = b""
        self._size = 0

    @property
    def in_frame(self) -> bool:
        """Whether a frame has started and not ended (a disconnect now loses it)."""
        return self._state in (_State.INSIDE, _State.OVERSIZE)

    @property
    def held(self) -> int:
        """Bytes of the current frame received so far."""
        return self._size

    def _start(self) -> None:
        self._state, self._buffer, self._head, self._size = _State.INSIDE, bytearray(), b"", 0

    def _append(self, chunk: bytes) -> None:
        self._size += len(chunk)
        if self._state is _State.INSIDE:
            if self._size > self.max_frame_bytes:
                self._head = bytes((self._buffer + chunk)[:HEAD_BYTES])
                self._buffer = bytearray()
                self._state = _State.OVERSIZE
            else:
                self._buffer += chunk

    def _current_head(self) -> bytes:
        return self._head or bytes(self._buffer[:HEAD_BYTES])

    def feed(self, data: bytes) -> list[Frame | BrokenFrame]:
        """Take the next bytes; return the frames (and broken frames) they completed."""
        events: list[Frame | BrokenFrame] = []
        i, n = 0, len(data)
        while i < n:
            if self._state is _State.AFTER_END:
                i += data[i] == CR
                self._state = _State.OUTSIDE
                continue
            if self._state is _State.OUTSIDE:
                start = data.find(START, i)
                self.discarded += _non_blank(data[i : n if start < 0 else start])
                if start < 0:
                    break
                self._start()
                i = start + 1
                continue
            ends = [p for p in (data.find(END, i), data.find(START, i)) if p >= 0]
            stop = min(ends) if ends else n
            self._append(data[i:stop])
            if stop == n:
                break
            if data[stop] == START:
                reason = "truncated frame: a start block (0x0B) came before the end block (0x1C)"
                events.append(BrokenFrame(reason, self._current_head()))
                self._start()
            elif self._state is _State.OVERSIZE:
                reason = f"frame of {self._size} bytes exceeds the limit of {self.max_frame_bytes}"
                events.append(BrokenFrame(reason, self._head, too_large=True))
                self._state, self._head, self._size = _State.AFTER_END, b"", 0
            else:
                events.append(Frame(bytes(self._buffer)))
                self._state, self._buffer, self._size = _State.AFTER_END, bytearray(), 0
            i = stop + 1
        return events
