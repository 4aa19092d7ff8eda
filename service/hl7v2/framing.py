"""MLLP framing, as a pure incremental decoder (HL7 MLLP transport specification, release 2).

A frame is ``0x0B`` (start block), the message, ``0x1C 0x0D`` (end block). Bytes arrive in
any cut: a frame may span many reads, one read may hold several frames. ``FrameDecoder.feed``
takes whatever arrived and returns the events it completed, in order:

* ``Frame`` — a complete message;
* ``BrokenFrame`` — a frame that cannot be used: larger than ``max_frame_bytes`` (its bytes
  are counted and dropped as they come, never held), larger than what the listener's shared
  ``FrameBudget`` has room for (``busy``: the peer should send it again later), or cut short
  by a new start block. It keeps the first bytes of the frame, so the answer can still name
  the MSH-10 it refuses.

Bytes outside a frame are dropped and counted (``discarded``); a CR right after an end block
is part of it. The decoder holds at most ``max_frame_bytes`` at any time, and every decoder of
a listener together at most their budget's limit (200 peers each holding an unfinished 1 MB
frame took 285 MB before there was one).
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
    busy: bool = False  # refused for the listener's budget, not for anything in the frame


class FrameBudget:
    """Bytes of unfinished frames that every connection of one listener holds together."""

    def __init__(self, limit: int) -> None:
        if limit < 1:
            raise ValueError("the budget must be at least one byte")
        self.limit = limit
        self.used = 0

    def take(self, size: int) -> bool:
        if self.used + size > self.limit:
            return False
        self.used += size
        return True

    def give(self, size: int) -> None:
        self.used = max(0, self.used - size)


class _State(Enum):
    OUTSIDE = 1
    INSIDE = 2
    OVERSIZE = 3
    AFTER_END = 4
    NO_ROOM = 5  # like OVERSIZE, for the budget


def _non_blank(data: bytes | bytearray) -> int:
    return len(data) - sum(data.count(c) for c in (b" ", b"\r", b"\n", b"\t"))


class FrameDecoder:
    """Turns a byte stream into frames; one decoder per connection."""

    def __init__(self, max_frame_bytes: int, budget: FrameBudget | None = None) -> None:
        if max_frame_bytes < 1:
            raise ValueError("max_frame_bytes must be at least 1")
        self.max_frame_bytes = max_frame_bytes
        self.budget = budget
        self.discarded = 0  # non-blank bytes seen outside any frame
        self._state = _State.OUTSIDE
        self._buffer = bytearray()
        self._head = b""
        self._size = 0

    @property
    def in_frame(self) -> bool:
        """Whether a frame has started and not ended (a disconnect now loses it)."""
        return self._state in (_State.INSIDE, _State.OVERSIZE, _State.NO_ROOM)

    def release(self) -> None:
        """Give back what the current frame holds of the budget (the connection ended)."""
        if self.budget is not None:
            self.budget.give(len(self._buffer))
        self._buffer = bytearray()

    @property
    def held(self) -> int:
        """Bytes of the current frame received so far."""
        return self._size

    def _start(self) -> None:
        self.release()
        self._state, self._buffer, self._head, self._size = _State.INSIDE, bytearray(), b"", 0

    def _drop(self, chunk: bytes, state: _State) -> None:
        """Stop holding the current frame: keep its head, count the rest as it comes."""
        self._head = bytes((self._buffer + chunk)[:HEAD_BYTES])
        self.release()
        self._state = state

    def _append(self, chunk: bytes) -> None:
        self._size += len(chunk)
        if self._state is _State.INSIDE:
            if self._size > self.max_frame_bytes:
                self._drop(chunk, _State.OVERSIZE)
            elif self.budget is not None and not self.budget.take(len(chunk)):
                self._drop(chunk, _State.NO_ROOM)
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
            elif self._state is _State.NO_ROOM:
                assert self.budget is not None
                reason = (
                    f"the server holds {self.budget.limit} bytes of unfinished frames at most and "
                    "had no room for this one; send it again later "
                    "(setting OXYRULE_MLLP_MAX_BUFFERED_BYTES)"
                )
                events.append(BrokenFrame(reason, self._head, busy=True))
                self._state, self._head, self._size = _State.AFTER_END, b"", 0
            else:
                events.append(Frame(bytes(self._buffer)))
                self.release()
                self._state, self._size = _State.AFTER_END, 0
            i = stop + 1
        return events
