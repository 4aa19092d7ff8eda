"""Strict readers for the JSON shapes of a FHIR resource, and the collector of what they find.

The adapter walks plain dicts from ``orjson`` (no model validation per request: it costs 51–95× the
parse; README, Performance). Each reader takes the parent object, the member name and the FHIRPath
of the parent, checks the member's JSON type, and on a wrong type records a located ``Problem`` and
returns None, so one pass finds every problem before the Bundle is refused once.
"""

from __future__ import annotations

import math
from typing import cast

from service.fhir.outcome import BundleError, IssueType, Problem, condensed, error
from service.intake.limits import DEFAULT_READ_LIMITS, REPEATS, condensed_issues
from service.intake.model import IntakeIssue, Severity

JsonObject = dict[str, object]


class Collector:
    """What one read found: problems that refuse the input, issues that are reported."""

    __slots__ = ("issues", "problems")

    def __init__(self) -> None:
        self.problems: list[Problem] = []
        self.issues: list[IntakeIssue] = []

    def problem(self, code: IssueType, diagnostics: str, expression: str) -> None:
        """Record a problem that makes the input unusable (raised at the end of the read)."""
        self.problems.append(error(code, diagnostics, expression))

    def issue(self, code: str, severity: Severity, message: str, expression: str) -> None:
        """Record a finding to report beside the result; reading goes on."""
        self.issues.append(IntakeIssue(code, severity, message, expression))

    def raise_problems(self, limit: int = DEFAULT_READ_LIMITS.max_issues) -> None:
        """Raise one BundleError with every problem recorded, if there is any (repeats
        counted, at most ``limit`` listed: ``service.intake.limits``)."""
        if self.problems:
            # A Specimen referenced twice is read twice: report each problem once.
            raise BundleError(condensed(list(dict.fromkeys(self.problems)), limit))

    def listed_issues(self, limit: int = DEFAULT_READ_LIMITS.max_issues) -> list[IntakeIssue]:
        """The issues to report: repeats counted, at most ``limit`` listed."""
        if len(self.issues) <= REPEATS:  # none repeated more than listed, under any limit
            return list(self.issues)
        return condensed_issues(self.issues, limit)


def json_type(value: object) -> str:
    """The JSON name of a value's type, for messages that must not quote the value."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "boolean"
    if isinstance(value, int | float):
        return "number"
    if isinstance(value, str):
        return "string"
    if isinstance(value, list):
        return "array"
    if isinstance(value, dict):
        return "object"
    return type(value).__name__


def _wrong_type(out: Collector, expected: str, value: object, at: str) -> None:
    out.problem("structure", f"expected {expected}, got {json_type(value)}", at)


def as_object(value: object, at: str, out: Collector) -> JsonObject | None:
    """``value`` if it is a JSON object, else a structure problem at ``at``."""
    if isinstance(value, dict):
        return cast(JsonObject, value)
    _wrong_type(out, "an object", value, at)
    return None


def _member(
    obj: JsonObject, key: str, at: str, out: Collector, required: bool
) -> tuple[object, str] | None:
    path = f"{at}.{key}"
    if key not in obj:
        if required:
            # Located at the element that lacks it: a path to the absent member would select
            # nothing in the input (FHIRPath).
            out.problem("required", f"'{key}' is required here", at)
        return None
    return obj[key], path


def member_object(
    obj: JsonObject, key: str, at: str, out: Collector, *, required: bool = False
) -> tuple[JsonObject, str] | None:
    """The object member ``key`` of ``obj`` and its FHIRPath, or None (absent or wrong type)."""
    found = _member(obj, key, at, out, required)
    if found is None:
        return None
    value, path = found
    checked = as_object(value, path, out)
    return None if checked is None else (checked, path)


def member_list(
    obj: JsonObject, key: str, at: str, out: Collector, *, required: bool = False
) -> list[object] | None:
    """The array member ``key`` of ``obj``, or None (absent or wrong type)."""
    found = _member(obj, key, at, out, required)
    if found is None:
        return None
    value, path = found
    if isinstance(value, list):
        return cast(list[object], value)
    _wrong_type(out, "an array", value, path)
    return None


def objects(items: list[object], at: str, out: Collector) -> list[tuple[JsonObject, str]]:
    """The items of an array that are objects, each with its FHIRPath ``at[i]``."""
    found: list[tuple[JsonObject, str]] = []
    for i, item in enumerate(items):
        path = f"{at}[{i}]"
        checked = as_object(item, path, out)
        if checked is not None:
            found.append((checked, path))
    return found


def member_str(
    obj: JsonObject, key: str, at: str, out: Collector, *, required: bool = False
) -> str | None:
    """The string member ``key`` of ``obj``, or None. FHIR strings are never empty."""
    found = _member(obj, key, at, out, required)
    if found is None:
        return None
    value, path = found
    if not isinstance(value, str):
        _wrong_type(out, "a string", value, path)
        return None
    if not value.strip():
        out.problem("value", "a FHIR string must not be empty or blank", path)
        return None
    return value


def member_number(
    obj: JsonObject, key: str, at: str, out: Collector, *, required: bool = False
) -> float | None:
    """The number member ``key`` of ``obj`` as a finite float, or None."""
    found = _member(obj, key, at, out, required)
    if found is None:
        return None
    value, path = found
    if isinstance(value, bool) or not isinstance(value, int | float):
        _wrong_type(out, "a number", value, path)
        return None
    number = finite_float(value)
    if number is None:
        out.problem("value", "expected a finite number", path)
    return number


def finite_float(value: int | float) -> float | None:
    """A JSON number as a finite float; None when it is not finite or too large for one.
    The one rule of ``member_number`` and of the usual shape of a quantity (``values``)."""
    try:
        number = float(value)
    except OverflowError:
        return None
    return number if math.isfinite(number) else None


def str_items(obj: JsonObject, key: str, at: str, out: Collector) -> list[str]:
    """The strings of an array-of-strings member (``meta.profile``); others are problems."""
    items = member_list(obj, key, at, out)
    if items is None:
        return []
    found: list[str] = []
    for i, item in enumerate(items):
        if isinstance(item, str):
            found.append(item)
        else:
            _wrong_type(out, "a string", item, f"{at}.{key}[{i}]")
    return found


MODIFIER_MESSAGE = (
    "a modifier extension the service does not understand changes what this element means "
    "(FHIR: it must not be read as if absent); the Bundle is not assessed"
)
IMPLICIT_RULES_MESSAGE = (
    "implicitRules: the resource was written under rules the service does not know (FHIR: it "
    "must not be read as if absent); the Bundle is not assessed"
)


def refuse_modifiers(obj: JsonObject, at: str, out: Collector, *, resource: bool = False) -> bool:
    """Record a problem for each ``modifierExtension`` (and, on a resource, ``implicitRules``)
    of ``obj``: the service understands none, so what holds one cannot be used. True when
    there was one."""
    found = False
    if "modifierExtension" in obj:
        out.problem("not-supported", MODIFIER_MESSAGE, f"{at}.modifierExtension")
        found = True
    if resource and "implicitRules" in obj:
        out.problem("not-supported", IMPLICIT_RULES_MESSAGE, f"{at}.implicitRules")
        found = True
    return found
