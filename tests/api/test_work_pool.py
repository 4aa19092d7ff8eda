"""Where a request's work runs (``service.work``): small FHIR bodies on the event loop, the rest
in the work threads, heavy ones one at a time."""

from __future__ import annotations

import asyncio
import threading

from service.config import ServerSettings
from service.work import HEAVY_BYTES, WorkPool

INLINE_BYTES = 16 * 1024  # a deployment's choice (OXYRULE_INLINE_BYTES)


def thread_of(size: int, threads: int = 2, inline_bytes: int = INLINE_BYTES) -> str:
    """The name of the thread ``run_sized`` ran a function in, for an input of ``size``."""

    async def scenario() -> str:
        pool = WorkPool(threads, inline_bytes=inline_bytes)
        try:
            return await pool.run_sized(size, lambda: threading.current_thread().name)
        finally:
            pool.close()

    return asyncio.run(scenario())


def test_a_small_body_is_assessed_on_the_loop_and_a_larger_one_in_a_work_thread() -> None:
    loop_thread = threading.current_thread().name  # asyncio.run runs the loop here
    assert thread_of(0) == loop_thread
    assert thread_of(INLINE_BYTES) == loop_thread
    assert thread_of(INLINE_BYTES + 1).startswith("oxyrule-work")
    assert thread_of(HEAVY_BYTES + 1).startswith("oxyrule-work")


def test_without_work_threads_everything_runs_on_the_loop() -> None:
    assert thread_of(HEAVY_BYTES + 1, threads=0) == threading.current_thread().name


def test_with_no_inline_size_even_an_empty_body_goes_to_a_work_thread() -> None:
    assert thread_of(0, inline_bytes=0).startswith("oxyrule-work")


def test_by_default_every_body_goes_to_a_work_thread() -> None:
    assert ServerSettings().inline_bytes == 0
    assert thread_of(0, inline_bytes=ServerSettings().inline_bytes).startswith("oxyrule-work")


def test_an_exception_reaches_the_caller_wherever_the_work_ran() -> None:
    def fails() -> None:
        raise ValueError("refused")

    async def scenario(size: int) -> str:
        pool = WorkPool(2, inline_bytes=INLINE_BYTES)
        try:
            await pool.run_sized(size, fails)
        except ValueError as exc:
            return str(exc)
        finally:
            pool.close()
        return "no exception"

    assert asyncio.run(scenario(10)) == "refused"
    assert asyncio.run(scenario(INLINE_BYTES * 2)) == "refused"
