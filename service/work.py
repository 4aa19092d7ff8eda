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

The hand-off has a price too: the wake-ups of two threads and the interpreter lock passing
between them. ``WorkPool.run`` keeps it small (a queue and one ``call_soon_threadsafe``, no
executor futures): with wrk on the service whose answer is made once, the HTTP layer's own work
per request beyond a bare FastAPI request fell from 152–165 µs with ``run_in_executor`` to
110–117 µs (``python -m tests.benchmarks.http``, alternating runs). A
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
import contextlib
import functools
import queue
import threading
from collections.abc import Callable
from typing import Any, ParamSpec, TypeVar

P = ParamSpec("P")
T = TypeVar("T")
HEAVY_BYTES = 1024 * 1024  # inputs larger than this are parsed one at a time

# One piece of work: the loop to answer on, the future it awaits and the call; None tells a
# thread to stop.
_Job = tuple[asyncio.AbstractEventLoop, "asyncio.Future[Any]", Callable[[], Any]] | None


class WorkPool:
    """A fixed number of threads for CPU-bound work; see the module docstring."""

    def __init__(self, threads: int, *, inline_bytes: int = 0) -> None:
        """``threads`` 0: run the work on the event loop itself (for comparison only);
        ``inline_bytes``: the largest input ``run_sized`` runs on the loop."""
        self.threads = threads
        self.inline_bytes = inline_bytes
        self._jobs: queue.SimpleQueue[_Job] | None = None  # threads started with the first work
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
        """``function(*args, **kwargs)`` in one of the threads; its result or its exception.

        Written here rather than ``loop.run_in_executor`` with a ``ThreadPoolExecutor``: that
        chains a ``concurrent.futures.Future`` (a lock and a condition) to an asyncio one, and
        measured on one core's hand-off of a trivial call (uvloop, CPU time) it cost 22–31 µs
        against 14–19 µs for this queue and one ``call_soon_threadsafe``."""
        if not self.threads:
            return function(*args, **kwargs)
        jobs = self._jobs
        if jobs is None:
            jobs = self._jobs = self._start()
        loop = asyncio.get_running_loop()
        answer: asyncio.Future[T] = loop.create_future()
        jobs.put((loop, answer, functools.partial(function, *args, **kwargs)))
        return await answer

    def _start(self) -> queue.SimpleQueue[_Job]:
        jobs: queue.SimpleQueue[_Job] = queue.SimpleQueue()
        for number in range(self.threads):
            name = f"oxyrule-work_{number}"
            threading.Thread(target=_work, args=(jobs,), name=name, daemon=True).start()
        return jobs

    def close(self) -> None:
        """Let the threads go (work queued and not started is dropped: its caller's wait is
        cancelled); more work starts new ones (an app whose lifespan runs again, as in tests)."""
        jobs, self._jobs = self._jobs, None
        if jobs is None:
            return
        while True:  # what no thread has taken yet
            try:
                job = jobs.get_nowait()
            except queue.Empty:
                break
            if job is not None:
                _answer(job[0], job[1].cancel)
        for _ in range(self.threads):
            jobs.put(None)


def _work(jobs: queue.SimpleQueue[_Job]) -> None:
    """A work thread: run each job and hand its outcome back to the job's loop."""
    while (job := jobs.get()) is not None:
        loop, answer, call = job
        if answer.cancelled():  # its caller has gone (a read of a flag; set on the loop)
            continue
        try:
            result = call()
        except BaseException as exc:  # the caller's to handle, as the executor did
            _answer(loop, functools.partial(_set_exception, answer, exc))
        else:
            _answer(loop, functools.partial(_set_result, answer, result))


def _answer(loop: asyncio.AbstractEventLoop, callback: Callable[[], object]) -> None:
    with contextlib.suppress(RuntimeError):  # the loop has closed: nobody waits any more
        loop.call_soon_threadsafe(callback)


def _set_result(answer: asyncio.Future[T], result: T) -> None:
    if not answer.done():  # cancelled while the thread ran
        answer.set_result(result)


def _set_exception(answer: asyncio.Future[Any], exc: BaseException) -> None:
    if not answer.done():
        answer.set_exception(exc)
