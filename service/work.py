"""The threads that parse, assess and render, so that no request holds the event loop.

Everything a request costs in CPU (JSON or HL7 v2 parsing, reading, the assessment, rendering
and serialising the answer) runs here, ``OXYRULE_WORK_THREADS`` at a time (unless small FHIR
bodies are set to run on the loop, below); the event loop only moves bytes. So a slow request
(the worst inside the limits takes a quarter of a second) delays the requests queued behind it,
but never ``/healthz``, ``/readyz`` or the reading of other requests: measured, ``/healthz``
answered with a p99 of ~260 ms and never missed its 2 s probe timeout while 16 clients sent
hostile inputs (``tests/load/hostile.py healthz``), where every probe failed before.

Threads rather than processes: the rule set and runtime are shared as they are, and Python
gives a thread waiting for the interpreter lock its turn within the switch interval (5 ms), so
the event loop answers while a thread computes. The price, measured with
``python -m tests.benchmarks.work`` on the demo Bundle, is given in deploy/README.md.

The hand-off has a price too: measured in process, a request whose answer was made in a
thread cost ~120 µs of CPU more than one made on the loop (the wake-ups of two threads and
the interpreter lock passing between them), about the whole of a bare FastAPI request. A
deployment that wants it back can have small FHIR bodies (``run_sized``: at most
``OXYRULE_INLINE_BYTES``; 0 by default) assessed on the loop itself: the worst 16 kB body, 47
PaO2 an hour apart to pair, took 7.5 ms, so a probe waits at most that long behind each one
ahead of it. It is off by default because, measured with wrk on the demo Bundle, it gained ~3 %
of throughput but lengthened the latency tail: p99 76–96 ms against 45–68 ms at 16
connections, 1.3 s against 0.6–0.7 s at 64. HL7 v2 messages (six times the work per byte: 230
OBX in 16 kB took 46 ms) and NDJSON lines always go to the threads.

Parsing a large body costs memory: JSON parsed into Python objects takes up to ~20 times its
size (4.5 MB of ``{"resource": {...}}`` entries: 93 MiB). Work on more than ``HEAVY_BYTES``
runs one at a time (``run_heavy``: it waits its turn on the event loop, holding no thread), so
the memory of parsing is bounded by one large body and ``threads`` small ones.
"""

from __future__ import annotations

import asyncio
import functools
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from typing import ParamSpec, TypeVar

P = ParamSpec("P")
T = TypeVar("T")
HEAVY_BYTES = 1024 * 1024  # inputs larger than this are parsed one at a time


class WorkPool:
    """A fixed number of threads for CPU-bound work; see the module docstring."""

    def __init__(self, threads: int, *, inline_bytes: int = 0) -> None:
        """``threads`` 0: run the work on the event loop itself (for comparison only);
        ``inline_bytes``: the largest input ``run_sized`` runs on the loop."""
        self.threads = threads
        self.inline_bytes = inline_bytes
        self._executor: ThreadPoolExecutor | None = None  # started with the first work
        self._heavy = asyncio.Semaphore(1)

    async def run_sized(
        self, size: int, function: Callable[P, T], *args: P.args, **kwargs: P.kwargs
    ) -> T:
        """``function`` on the loop itself when the input is at most ``inline_bytes`` (work
        bounded to a few milliseconds; see the module docstring), else ``run_heavy``."""
        if self.inline_bytes and size <= self.inline_bytes:
            return function(*args, **kwargs)
        return await self.run_heavy(size, function, *args, **kwargs)

    async def run_heavy(
        self, size: int, function: Callable[P, T], *args: P.args, **kwargs: P.kwargs
    ) -> T:
        """``run``, one at a time when the input is larger than ``HEAVY_BYTES``."""
        if size <= HEAVY_BYTES:
            return await self.run(function, *args, **kwargs)
        async with self._heavy:
            return await self.run(function, *args, **kwargs)

    async def run(self, function: Callable[P, T], *args: P.args, **kwargs: P.kwargs) -> T:
        """``function(*args, **kwargs)`` in one of the threads; its result or its exception."""
        if not self.threads:
            return function(*args, **kwargs)
        if self._executor is None:
            self._executor = ThreadPoolExecutor(self.threads, thread_name_prefix="oxyrule-work")
        loop = asyncio.get_running_loop()
        call = functools.partial(function, *args, **kwargs)
        return await loop.run_in_executor(self._executor, call)

    def close(self) -> None:
        """Let the threads go (work queued and not started is dropped); more work starts new
        ones (an app whose lifespan runs again, as in tests)."""
        if self._executor is not None:
            self._executor.shutdown(wait=False, cancel_futures=True)
            self._executor = None
