"""Loading the rule set again while serving (``SIGHUP``), all or nothing.

``reload_runtime`` loads the rule set, site file and code map again from the settings the app
started with, in a worker thread (the event loop keeps answering meanwhile), and checks them as
completely as at start: the loader, then every check of ``oxyrule lint``
(``service.workbench.lint.verified_runtime``: a set lint rejects is refused). On success the
new runtime replaces the old one in one step on the event loop (``install_runtime``: runtime,
CapabilityStatement and the rule-set metric together), so each request sees one rule set or
the other, never a mix, and the new identity is logged. On failure nothing changes: the loaded
rule set keeps serving, and the refusal is logged at error level with the problem named (file
and reason; rule files hold no patient data). A request already in progress finishes with the
runtime it started with.

With one worker (the deployment's mode) the process reloads itself on ``SIGHUP``. With
several, the supervisor verifies and copies the set, and each worker's ``SIGHUP`` only prepares
that copy (``prepare_generation``); every worker switches to it at the same instant when the
supervisor commits it, at the start of its next request (``follow_generation``;
``service.api.generations`` tells the whole story).
"""

from __future__ import annotations

import asyncio
import gc
import logging
import signal
import threading

from service.api.capability import capability_statement, operation_definition
from service.api.logs import SERVER_LOGGER
from service.api.state import ServiceState
from service.runtime import Runtime
from service.workbench.lint import verified_runtime

log = logging.getLogger(SERVER_LOGGER)
PROBLEM_CHARS = 2000  # a rule set error can list many problems; the log line stays readable


def identity(runtime: Runtime) -> str:
    """The rule set a runtime serves: ``id|version`` and its content hash."""
    ruleset = runtime.ruleset
    return f"{ruleset.id}|{ruleset.version} {ruleset.content_hash}"


def install_runtime(service: ServiceState, runtime: Runtime) -> None:
    """Make ``runtime`` the one the app serves (synchronous: atomic on the event loop)."""
    ruleset = runtime.ruleset
    service.conformance = {
        "CapabilityStatement": capability_statement(runtime, service.auth.methods),
        "OperationDefinition": operation_definition(),
    }
    service.metrics.ruleset.values.clear()
    service.metrics.ruleset.set(
        1, (("id", ruleset.id), ("version", ruleset.version), ("hash", ruleset.content_hash))
    )
    service.runtime = runtime


def _problem(exc: BaseException) -> str:
    text = str(exc).strip() or "no detail"
    if isinstance(exc, OSError) and exc.filename:
        text = f"cannot read {exc.filename}: {exc.strerror}"
    return f"{type(exc).__name__}: {text}"[:PROBLEM_CHARS]


def _swap(service: ServiceState, runtime: Runtime) -> None:
    install_runtime(service, runtime)
    if gc.get_freeze_count():  # start-up froze the old set (server.settle_memory)
        gc.unfreeze()  # so that what only the old set held can be collected,
        gc.collect()  # once (one pause, per reload),
        gc.freeze()  # and the new set kept out of later collections


async def prepare_generation(service: ServiceState) -> bool:
    """A worker of a multi-worker server: load and verify the generation the supervisor asks
    for, beside the set being served, and report ready (or why not)."""
    generations = service.generations
    assert generations is not None
    async with service.reload_lock:
        number = generations.pending()
        if number is None or number <= service.generation:
            return False
        try:
            runtime = await asyncio.to_thread(generations.load, number, service.settings)
        except Exception as exc:
            generations.report(number, _problem(exc))
            log.error(
                "rule set generation refused by this worker",
                extra={"ruleset": identity(service.runtime), "problem": _problem(exc)},
            )
            return False
        service.prepared = {number: runtime}
        generations.report(number, "ready")
        return True


async def follow_generation(service: ServiceState) -> None:
    """A worker of a multi-worker server: serve the committed generation (called at the start
    of every request; a read of shared memory when nothing changed)."""
    generations = service.generations
    if generations is None or generations.committed() == service.generation:
        return
    async with service.reload_lock:
        committed = generations.committed()
        if committed == service.generation:
            return  # another request switched while this one waited
        runtime = service.prepared.pop(committed, None)
        if runtime is None:  # committed while this worker was starting: load it now
            runtime = await asyncio.to_thread(generations.load, committed, service.settings)
        previous = identity(service.runtime)
        _swap(service, runtime)
        service.generation, service.prepared = committed, {}
        log.info(
            "rule set switched",
            extra={"ruleset": identity(runtime), "previous": previous},
        )


async def reload_runtime(service: ServiceState) -> bool:
    """Load the rule set again and swap it in; False (old one kept, error logged) on failure."""
    if service.generations is not None:
        return await prepare_generation(service)
    async with service.reload_lock:  # two quick signals: one reload after the other
        try:
            runtime = await asyncio.to_thread(verified_runtime, service.settings)
        except Exception as exc:  # anything: refuse the new set, keep serving the loaded one
            log.error(
                "rule set reload refused; still serving the loaded rule set",
                extra={"ruleset": identity(service.runtime), "problem": _problem(exc)},
            )
            return False
        previous = identity(service.runtime)
        _swap(service, runtime)
        log.info(
            "rule set reloaded",
            extra={"ruleset": identity(runtime), "previous": previous},
        )
        return True


def handle_sighup(service: ServiceState) -> bool:
    """Reload on ``SIGHUP`` from now on; False where signals cannot be handled (not the main
    thread, as in tests that run the server in a thread, or no Unix signals)."""
    if threading.current_thread() is not threading.main_thread() or not hasattr(signal, "SIGHUP"):
        return False
    loop = asyncio.get_running_loop()
    tasks: set[asyncio.Task[bool]] = set()

    def reload() -> None:
        log.info("SIGHUP: reloading the rule set", extra={"ruleset": identity(service.runtime)})
        task = loop.create_task(reload_runtime(service))
        tasks.add(task)  # keep a reference until it is done
        task.add_done_callback(tasks.discard)

    loop.add_signal_handler(signal.SIGHUP, reload)
    return True


def stop_handling_sighup() -> None:
    """Undo ``handle_sighup`` (at shutdown)."""
    if threading.current_thread() is threading.main_thread() and hasattr(signal, "SIGHUP"):
        asyncio.get_running_loop().remove_signal_handler(signal.SIGHUP)
