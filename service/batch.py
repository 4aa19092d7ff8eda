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


def _work(item: tuple[int, bytes]) -> tuple[int, bytes, bool]:
    assert _worker is not None
    runtime, unit = _worker
    number, raw = item
    return (number, *answer(runtime, raw, f"line {number}", unit))


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
) -> Iterator[tuple[int, bytes, bool]]:
    """Answers to NDJSON lines, in order: (line number, answer, whether it was rejected)."""
    if workers <= 1:
        runtime = Runtime.load(settings)
        for number, raw in lines:
            yield (number, *answer(runtime, raw, f"line {number}", unit))
        return
    context = multiprocessing.get_context("spawn")
    with context.Pool(workers, initializer=_init_worker, initargs=(settings, unit)) as pool:
        yield from pool.imap(_work, lines, chunksize=16)


SHOWN_LINE_NUMBERS = 20
"""Rejected line numbers the summary lists; past them it counts the rest."""


class Progress:
    """A progress counter on stderr while a terminal watches, and always, at the end, one line
    saying what happened: ``oxyrule: 98 assessed, 2 rejected (lines 3, 7), 0.41 s``."""

    def __init__(self, stream: IO[str] | None = None) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.live = self.stream.isatty()
        self.count = 0
        self.rejected: list[int] = []
        self.started = time.monotonic()

    def step(self, number: int = 0, rejected: bool = False) -> None:
        """Count one input (its line ``number``, and whether it was rejected)."""
        self.count += 1
        if rejected:
            self.rejected.append(number)
        if self.live and self.count % 100 == 0:
            rate = self.count / max(time.monotonic() - self.started, 1e-9)
            self.stream.write(f"\roxyrule: {self.count} bundles, {rate:,.0f}/s")
            self.stream.flush()

    def summary(self) -> str:
        """The closing line (without its newline)."""
        seconds = time.monotonic() - self.started
        assessed = self.count - len(self.rejected)
        line = f"oxyrule: {assessed} assessed, {len(self.rejected)} rejected"
        if self.rejected:
            shown = ", ".join(str(n) for n in self.rejected[:SHOWN_LINE_NUMBERS])
            more = len(self.rejected) - SHOWN_LINE_NUMBERS
            word = "line" if len(self.rejected) == 1 else "lines"
            line += f" ({word} {shown}" + (f" and {more} more)" if more > 0 else ")")
        return line + f", {seconds:.2f} s"

    def close(self) -> None:
        """End the live counter's line and write the summary."""
        if self.live and self.count >= 100:
            self.stream.write("\n")
        self.stream.write(self.summary() + "\n")
        self.stream.flush()
