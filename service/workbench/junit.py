"""JUnit XML for CI systems, from a fixture run."""

from __future__ import annotations

import xml.etree.ElementTree as ET

from .expectations import mismatch_table
from .runner import CaseResult


def junit_xml(results: list[CaseResult], *, suite: str = "oxyrule-fixtures") -> bytes:
    """A ``<testsuite>`` with one ``<testcase>`` per fixture case."""
    failures = sum(not r.passed for r in results)
    skipped = sum(r.status == "known-gap" for r in results)
    root = ET.Element(
        "testsuite",
        name=suite,
        tests=str(len(results)),
        failures=str(failures),
        skipped=str(skipped),
        time=f"{sum(r.seconds for r in results):.3f}",
    )
    for r in results:
        case = ET.SubElement(
            root, "testcase", classname=suite, name=r.case.name, time=f"{r.seconds:.3f}"
        )
        if r.status == "known-gap":
            ET.SubElement(case, "skipped", message=f"known gap: {r.case.outcome.known_gap}")
        elif r.status == "gap-closed":
            failure = ET.SubElement(case, "failure", message="known gap now passes")
            failure.text = "Remove the known_gap marker from the expected-outcome file."
        elif r.error is not None:
            ET.SubElement(case, "error", message="input rejected").text = r.error
        elif r.mismatches:
            failure = ET.SubElement(case, "failure", message=f"{len(r.mismatches)} mismatches")
            failure.text = mismatch_table(r.mismatches)
    text: bytes = ET.tostring(root, encoding="utf-8", xml_declaration=True)
    return text
