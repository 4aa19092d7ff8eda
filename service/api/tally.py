"""What a result says, in counts: its verdict pattern and its finding codes.

Read from the result's Parameters resource (README: What it answers), never from anything else
in the result, so what reaches the metrics and the request log is a code from a closed set.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import orjson


@dataclass(frozen=True, slots=True)
class Tally:
    """The pattern of one result (None for an OperationOutcome) and its finding codes."""

    pattern: str | None
    findings: tuple[str, ...] = ()
    rejected_code: str | None = None  # the first issue code of a refusal


def _parameters(result: Mapping[str, Any]) -> list[Any]:
    # (dict, Mapping): a dict, what JSON gives, is told at once; the abstract check costs more.
    for entry in result.get("entry") or ():
        resource = entry.get("resource") if isinstance(entry, (dict, Mapping)) else None
        if isinstance(resource, (dict, Mapping)) and resource.get("resourceType") == "Parameters":
            parameters = resource.get("parameter")
            return parameters if isinstance(parameters, list) else []
    return []


def tally(result: Mapping[str, Any]) -> Tally:
    """The tally of a result Bundle or of a refusing OperationOutcome."""
    if result.get("resourceType") == "OperationOutcome":
        issues = result.get("issue") or [{}]
        return Tally(None, rejected_code=str(issues[0].get("code", "invalid")))
    pattern: str | None = None
    findings: list[str] = []
    # One plain loop (no generator, names compared once): it runs for every answer, over
    # some 40 parameters of which only the pattern and the findings count.
    for parameter in _parameters(result):
        name = parameter.get("name")
        if name == "finding":
            for part in parameter.get("part", ()):
                if part.get("name") == "code" and "valueCode" in part:
                    findings.append(part["valueCode"])
        elif name == "pattern":
            pattern = parameter.get("valueCode")
    return Tally(pattern, tuple(findings))


def tally_json(text: bytes) -> Tally:
    """The tally of a serialised result (an NDJSON output line)."""
    return tally(orjson.loads(text))
