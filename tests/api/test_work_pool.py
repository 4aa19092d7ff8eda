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


def test_closing_cancels_the_work_no_thread_has_taken_and_lets_the_running_one_finish() -> None:
    release = threading.Event()
    ran: list[str] = []

    def first() -> str:
        release.wait(5)
        ran.append("first")
        return "first"

    async def scenario() -> tuple[object, bool]:
        pool = WorkPool(1)
        running = asyncio.ensure_future(pool.run(first))
        queued = asyncio.ensure_future(pool.run(ran.append, "second"))
        await asyncio.sleep(0.05)  # the one thread has taken the first job
        pool.close()
        release.set()
        outcome = await running
        try:
            await queued
        except asyncio.CancelledError:
            return outcome, True
        return outcome, False

    assert asyncio.run(scenario()) == ("first", True)
    assert ran == ["first"]  # the queued call never ran


def test_work_whose_caller_has_gone_before_a_thread_took_it_is_not_run() -> None:
    release = threading.Event()
    ran: list[str] = []

    async def scenario() -> None:
        pool = WorkPool(1)
        try:
            busy = asyncio.ensure_future(pool.run(release.wait, 5))
            gone = asyncio.ensure_future(pool.run(ran.append, "gone"))
            await asyncio.sleep(0.05)
            gone.cancel()  # the client went away while its work waited in the queue
            await asyncio.sleep(0)
            release.set()
            await busy
            await pool.run(ran.append, "next")  # the thread goes on working
        finally:
            pool.close()

    asyncio.run(scenario())
    assert ran == ["next"]


def test_a_pool_closed_and_used_again_starts_new_threads() -> None:
    async def scenario() -> list[str]:
        pool = WorkPool(2)
        names = [await pool.run(lambda: threading.current_thread().name)]
        pool.close()
        names.append(await pool.run(lambda: threading.current_thread().name))
        pool.close()
        return names

    assert all(name.startswith("oxyrule-work") for name in asyncio.run(scenario()))
