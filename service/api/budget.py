"""The bytes of request bodies one process holds at once, shared by every request.

Each request is bounded on its own (``OXYRULE_MAX_BODY_BYTES`` for a Bundle or a message,
``OXYRULE_NDJSON_READ_AHEAD_BYTES`` for the NDJSON lines read ahead of their answers), but 64
requests each holding its own limit would hold 64 times as much: this budget
(``OXYRULE_MAX_BUFFERED_BYTES``) bounds their sum, so the memory a worker needs for bodies is
known whatever the clients do. A Bundle or a message that does not fit is refused with 429
(``try_take``); NDJSON reading waits for room instead (``take``), which is backpressure on the
upload. Bytes are given back once their answer is made.

Used from the event loop only (no lock needed).
"""

from __future__ import annotations

import asyncio
from collections import deque

from service.config import ServerSettings


class ByteBudget:
    """A count of bytes in use against a limit; see the module docstring."""

    def __init__(self, limit: int) -> None:
        if limit < 1:
            raise ValueError("the budget must be at least one byte")
        self.limit = limit
        self.used = 0
        self._waiting: deque[tuple[int, asyncio.Future[None]]] = deque()

    @property
    def free(self) -> int:
        return self.limit - self.used

    def try_take(self, size: int) -> bool:
        """Take ``size`` bytes if they are free now (and nobody waits before us)."""
        if size > self.free or self._waiting:
            return False
        self.used += size
        return True

    async def take(self, size: int) -> None:
        """Take ``size`` bytes (at most the limit), waiting in turn until they are free."""
        size = min(size, self.limit)
        if self.try_take(size):
            return
        future: asyncio.Future[None] = asyncio.get_running_loop().create_future()
        entry = (size, future)
        self._waiting.append(entry)
        try:
            await future
        except BaseException:
            if entry in self._waiting:
                self._waiting.remove(entry)
            elif future.done() and not future.cancelled():
                self.give(size)  # granted as we were cancelled: hand it on
            raise

    def give(self, size: int) -> None:
        """Give back bytes taken; wake whoever waits, in order, while there is room."""
        self.used = max(0, self.used - min(size, self.limit))
        while self._waiting and self._waiting[0][0] <= self.free:
            size, future = self._waiting.popleft()
            if future.cancelled():
                continue
            self.used += size
            future.set_result(None)


# What one worker needs at worst, from its settings: the figure the pod's memory limit must
# exceed with room to spare (deploy/README.md, "Memory"; tests/api/test_deploy.py). Measured
# on this project's machine (python -m tests.load.hostile amplification):
BASE_BYTES = 72 * 1024 * 1024  # RSS after start-up, rule set loaded: 66-67 MiB
PARSE_FACTOR = 21  # Python objects per byte of JSON at worst: [{},{},...] takes ~64 B per 3 B;
#                    4.5 MB of {"resource": {...}} entries measured 93 MiB (tracemalloc)
ANSWER_BYTES = 640 * 1024  # the largest answer inside the budgets (1,000 gases: 552 kB)


def worst_case_bytes(server: ServerSettings) -> int:
    """Start-up, plus every budget full at once: bodies held, one large body being parsed
    (``service.work``: one at a time) beside small ones in the other threads and one on the
    event loop (``OXYRULE_INLINE_BYTES``), an answer held
    for every request in flight, and MLLP's unfinished frames when MLLP is on."""
    from service.work import HEAVY_BYTES

    largest = server.max_body_bytes * PARSE_FACTOR
    smaller = min(server.max_body_bytes, HEAVY_BYTES) * PARSE_FACTOR
    parsing = largest + smaller * max(server.work_threads - 1, 0)
    parsing += min(server.inline_bytes, server.max_body_bytes) * PARSE_FACTOR
    mllp = server.mllp_max_buffered_bytes if server.mllp_port is not None else 0
    answers = server.max_concurrent_requests * ANSWER_BYTES
    return BASE_BYTES + server.max_buffered_bytes + parsing + answers + mllp
