"""The threads that parse, assess and render, so that no request holds the event loop.

Everything a request costs in CPU (JSON or HL7 v2 parsing, reading, the assessment, rendering
and serialising the answer) runs here, ``OXYRULE_WORK_THREADS`` at a time; the event loop only
moves bytes. So a slow request (the worst inside the limits takes about a second) delays the
requests queued behind it, but never ``/healthz``, ``/readyz`` or the reading of other
requests: measured, ``/healthz`` answered in milliseconds while 16 clients sent the worst
in-limit inputs (tests/load/hostile.py), where it used to wait for minutes.

Threads rather than processes: the rule set and runtime are shared as they are, and Python
gives a thread waiting for the interpreter lock its turn within the switch interval (5 ms), so
the event loop answers while a thread computes. The price, measured with
``python -m tests.benchmarks.http`` on the demo Bundle, is given in deploy/README.md.
"""

from __future__ import annotations

import asyncio
import functools
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from typing import ParamSpec, TypeVar

P = ParamSpec("P")
T = TypeVar("T")


class WorkPool:
    """A fixed number of threads for CPU-bound work; see the module docstring."""

    def __init__(self, threads: int) -> None:
        """``threads`` 0: run the work on the event loop itself (for comparison only)."""
        self.threads = threads
        self._executor: ThreadPoolExecutor | None = None  # started with the first work

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
