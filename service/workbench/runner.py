"""Run expected-outcome fixtures through the real assess path and collect what happened."""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import orjson

from service.assess.result import Assessment
from service.fhir.extract import read_bundle
from service.fhir.outcome import LocatedError
from service.runtime import Runtime

from .expectations import Case, Mismatch, check


@dataclass(slots=True)
class CaseResult:
    """The outcome of one case. ``known_gap`` cases are expected to fail."""

    case: Case
    assessment: Assessment | None
    mismatches: list[Mismatch] = field(default_factory=list)
    error: str | None = None  # the input was rejected or could not be read
    seconds: float = 0.0

    @property
    def held(self) -> bool:
        """Whether every expectation held."""
        return self.error is None and not self.mismatches

    @property
    def passed(self) -> bool:
        """Held, or failed as its known-gap marker says it should."""
        return self.held != bool(self.case.outcome.known_gap)

    @property
    def status(self) -> str:
        """passed | failed | known-gap | gap-closed."""
        if self.case.outcome.known_gap:
            return "gap-closed" if self.held else "known-gap"
        return "passed" if self.held else "failed"


def run_case(case: Case, runtime: Runtime) -> CaseResult:
    """Assess one case's Bundle and check its expectation."""
    started = time.perf_counter()
    try:
        data = orjson.loads(case.bundle_path.read_bytes())
        intake = read_bundle(data, concept_map=runtime.concept_map)
    except (orjson.JSONDecodeError, LocatedError, OSError) as exc:
        return CaseResult(case, None, error=str(exc), seconds=time.perf_counter() - started)
    assessment = runtime.assess_intake(intake)
    mismatches = check(case.outcome.expect, assessment)
    return CaseResult(case, assessment, mismatches, seconds=time.perf_counter() - started)


def run_cases(cases: list[Case], runtime: Runtime) -> list[CaseResult]:
    """Every case, in order."""
    return [run_case(case, runtime) for case in cases]


def summary_line(results: list[CaseResult]) -> str:
    """``N passed, M failed`` (known gaps count as passed while they still fail)."""
    passed = sum(r.passed for r in results)
    line = f"{passed} passed, {len(results) - passed} failed"
    gaps = sum(r.status == "known-gap" for r in results)
    return line + (f", {gaps} known gaps" if gaps else "")
