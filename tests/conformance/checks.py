"""Every independent check over one input's answers, and the counts the issue asks for.

``problems(output)`` runs each validator once over what the service answered to one input and
returns the problems by check. ``python -m tests.conformance.checks`` prints the counts over
every fixture and every error-producing input (schema failures, R4 and R4B model failures,
unresolved references, FHIRPath misses, hl7apy strict failures, non-UCUM units).
"""

from __future__ import annotations

import sys
from collections.abc import Iterable, Mapping
from typing import Any

from tests.conformance import validators as v
from tests.conformance.corpus import Output, outputs

CHECKS = ("schema", "r4b", "r4", "references", "fhirpath", "hl7apy", "ucum")


def _outcomes(answer: Mapping[str, Any]) -> Iterable[Mapping[str, Any]]:
    """The OperationOutcomes of an answer: itself, or the entries of a result Bundle."""
    if answer.get("resourceType") == "OperationOutcome":
        yield answer
    for entry in answer.get("entry") or ():
        if entry.get("resource", {}).get("resourceType") == "OperationOutcome":
            yield entry["resource"]


def problems(output: Output) -> dict[str, list[str]]:
    """The problems each check (but ``r4``, checked in batches) finds in ``output``."""
    found: dict[str, list[str]] = {name: [] for name in CHECKS}
    for n, answer in enumerate(output.fhir):
        tag = f"fhir[{n}]"
        found["schema"] += [f"{tag} {p}" for p in v.schema_errors(answer)]
        found["r4b"] += [f"{tag} {p}" for p in v.r4b_errors(answer)]
        found["ucum"] += [f"{tag} {p}" for p in v.non_ucum_units(answer)]
        if answer.get("resourceType") == "Bundle":
            found["references"] += [f"{tag} {p}" for p in v.unresolved_references(answer)]
        for outcome in _outcomes(answer):
            found["fhirpath"] += [f"{tag} {p}" for p in v.fhirpath_misses(outcome, output.sent)]
    for n, er7 in enumerate(output.er7):
        tag = f"er7[{n}]"
        found["hl7apy"] += [f"{tag} {p}" for p in v.hl7_strict_errors(er7)]
        found["ucum"] += [f"{tag} {p}" for p in v.hl7_non_ucum_units(er7)]
    return found


def r4_problems(every: Mapping[str, Output]) -> dict[str, list[str]]:
    """The R4 model check of every FHIR answer, in one batch: problems by input name."""
    named = {
        f"{name}\x00{n}": answer
        for name, output in every.items()
        for n, answer in enumerate(output.fhir)
    }
    by_name: dict[str, list[str]] = {name: [] for name in every}
    for key, errors in v.r4_model_errors(named).items():
        name, n = key.split("\x00")
        by_name[name] += [f"fhir[{n}] {e}" for e in errors]
    return by_name


def main() -> int:
    every = outputs()
    totals = dict.fromkeys(CHECKS, 0)
    failing = dict.fromkeys(CHECKS, 0)
    r4 = r4_problems(every)
    for name, output in every.items():
        found = problems(output)
        found["r4"] = r4[name]
        for check, listed in found.items():
            totals[check] += len(listed)
            failing[check] += bool(listed)
            for p in listed[:3]:
                sys.stdout.write(f"{check}\t{name}\t{p[:300]}\n")
    sys.stdout.write(f"inputs: {len(every)}\n")
    for check in CHECKS:
        sys.stdout.write(f"{check}: {totals[check]} problems in {failing[check]} inputs\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
