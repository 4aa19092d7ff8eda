"""Assessing many inputs: one Bundle, or NDJSON of Bundles, in order, optionally in parallel.

Each input line is answered by one output line (a result Bundle, or an OperationOutcome that
names the line), in input order. With ``workers`` > 1 the lines go to a process pool whose
workers each load the rule set once; ``imap`` keeps the order. Memory stays bounded: lines are
read, assessed and written as a stream.
"""

from __future__ import annotations

import multiprocessing
import sys
import time
from collections.abc import Iterable, Iterator
from dataclasses import replace
from typing import IO

import orjson

from service.assess.presentation import PressureUnit
from service.config import Settings
from service.fhir import json_body
from service.fhir.operation import operation_input
from service.fhir.outcome import LocatedError, error, operation_outcome
from service.intake.limits import DEFAULT_READ_LIMITS, ReadLimits
from service.runtime import Runtime

# One worker process's runtime, set by the pool initialiser.
_worker: tuple[Runtime, PressureUnit | None] | None = None


def answer(
    runtime: Runtime,
    raw: bytes,
    where: str,
    unit: PressureUnit | None,
    limits: ReadLimits = DEFAULT_READ_LIMITS,
) -> tuple[bytes, bool]:
    """The output for one input (JSON bytes) and whether the input was rejected."""
    try:
        sent = operation_input(json_body.loads(raw))
        result = runtime.assess_bundle(
            sent.bundle,
            pressure_unit=_unit(sent.units) or unit,
            limits=limits,
            root=sent.root,
        )
        return orjson.dumps(result), False
    except orjson.JSONDecodeError as exc:
        problem = error("structure", f"{where}: not JSON ({exc.msg})", "")
        return orjson.dumps(operation_outcome([problem])), True
    except LocatedError as exc:
        problems = exc.problems
        if where.startswith("line"):  # NDJSON: every issue names its line
            problems = tuple(replace(p, diagnostics=f"{where}: {p.diagnostics}") for p in problems)
        return orjson.dumps(operation_outcome(problems)), True


def _unit(code: str | None) -> PressureUnit | None:
    """A Parameters body's ``units`` when it is a unit offered (the CLI's --units otherwise)."""
    return "kPa" if code == "kPa" else "mm[Hg]" if code == "mm[Hg]" else None


def _init_worker(settings: Settings, unit: PressureUnit | None) -> None:
    global _worker
    _worker = (Runtime.load(settings), unit)


def _work(item: tuple[int, bytes]) -> tuple[bytes, bool]:
    assert _worker is not None
    runtime, unit = _worker
    number, raw = item
    return answer(runtime, raw, f"line {number}", unit)


def numbered_lines(stream: IO[bytes]) -> Iterator[tuple[int, bytes]]:
    """Non-blank lines with their 1-based line numbers."""
    for number, line in enumerate(stream, start=1):
        if line.strip():
            yield number, line


def assess_lines(
    lines: Iterable[tuple[int, bytes]],
    *,
    settings: Settings,
    unit: PressureUnit | None,
    workers: int = 1,
) -> Iterator[tuple[bytes, bool]]:
    """Answers to NDJSON lines, in order."""
    if workers <= 1:
        runtime = Runtime.load(settings)
        for number, raw in lines:
            yield answer(runtime, raw, f"line {number}", unit)
        return
    context = multiprocessing.get_context("spawn")
    with context.Pool(workers, initializer=_init_worker, initargs=(settings, unit)) as pool:
        yield from pool.imap(_work, lines, chunksize=16)


class Progress:
    """A one-line progress counter on stderr, shown only when stderr is a terminal."""

    def __init__(self, stream: IO[str] = sys.stderr) -> None:
        self.stream = stream
        self.enabled = stream.isatty()
        self.count = 0
        self.started = time.monotonic()

    def step(self) -> None:
        self.count += 1
        if self.enabled and self.count % 100 == 0:
            rate = self.count / max(time.monotonic() - self.started, 1e-9)
            self.stream.write(f"\roxyrule: {self.count} bundles, {rate:,.0f}/s")
            self.stream.flush()

    def close(self) -> None:
        if self.enabled and self.count >= 100:
            self.stream.write("\n")
