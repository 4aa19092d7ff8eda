"""FHIR ``dateTime``, ``instant`` and ``date`` strings as Python values.

FHIR allows a dateTime to be a year, a year-month, a date, or a date and time; when a time is
given the zone is required (R4 datatypes). The service pairs measurements by time, so it keeps
the precision it was given: a partial value comes back with ``precise=False`` and is reported
(``time-imprecise``), rather than the service pretending to know the hour. ``effective_time``
reads when an Observation was made from ``effective[x]``, else from ``issued``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import UTC, date, datetime

from service.fhir.shape import Collector, JsonObject, member_object
from service.fhir.shape import member_str as text
from service.intake.model import Severity

_DATE_TIME = re.compile(
    r"(?P<year>\d{4})(?:-(?P<month>\d{2})(?:-(?P<day>\d{2})"
    r"(?:T(?P<hour>\d{2}):(?P<minute>\d{2}):(?P<second>\d{2})(?:\.(?P<fraction>\d{1,9}))?"
    r"(?P<zone>Z|[+-]\d{2}:\d{2}))?)?)?",
    re.ASCII,
)


_EFFECTIVE = ("effectiveDateTime", "effectivePeriod", "effectiveInstant", "effectiveTiming")


@dataclass(frozen=True, slots=True)
class When:
    """A parsed time: aware ``value``; ``precise`` is False for a date without a time."""

    value: datetime
    precise: bool


def parse_date_time(text: str, *, instant: bool = False) -> When:
    """Parse a FHIR dateTime (or, with ``instant``, a FHIR instant).

    A year, year-month or date is read as the start of that period in UTC with
    ``precise=False``. An instant must carry a time and a zone.

    Raises:
        ValueError: not a FHIR dateTime/instant, or not a real calendar time.
    """
    value, precise = _date_time(text, instant)
    return When(value, precise)


def _date_time(text: str, instant: bool) -> tuple[datetime, bool]:
    """``parse_date_time`` as a plain pair (the reader calls it once per Observation)."""
    match = _DATE_TIME.fullmatch(text)
    if match is None:
        raise ValueError(
            "not a FHIR dateTime: expected YYYY, YYYY-MM, YYYY-MM-DD or "
            "YYYY-MM-DDThh:mm:ss[.fff] with a zone (Z or +hh:mm)"
        )
    year, month, day, hour, zone = match.group("year", "month", "day", "hour", "zone")
    if hour is None:
        if instant:
            raise ValueError("a FHIR instant needs a time and a zone")
        return datetime(int(year), int(month or 1), int(day or 1), tzinfo=UTC), False
    if zone != "Z" and (zone[1:3] > "14" or zone[4:6] > "59"):
        raise ValueError("time-zone offset out of range")
    # The pattern above has fixed the language (4-digit year, seconds required, 1-9 fraction
    # digits, a zone); within it ``fromisoformat`` reads the same fields as the groups would
    # give, truncates the fraction to microseconds likewise, and refuses the same impossible
    # values (hour 24, second 60, 30 February) with the same messages as ``datetime()``.
    return datetime.fromisoformat(text), True


def parse_date(text: str) -> tuple[date, bool]:
    """Parse a FHIR date (YYYY, YYYY-MM or YYYY-MM-DD) as (first day, whether it was full).

    Raises:
        ValueError: not a FHIR date, or not a real calendar date.
    """
    match = _DATE_TIME.fullmatch(text)
    if match is None or match.group("hour") is not None:
        raise ValueError("not a FHIR date: expected YYYY, YYYY-MM or YYYY-MM-DD")
    day = match.group("day")
    value = date(int(match.group("year")), int(match.group("month") or 1), int(day or 1))
    return value, day is not None


def effective_time(resource: JsonObject, at: str, out: Collector) -> datetime | None:
    """When the Observation was made: effective[x], else ``issued`` (reported)."""
    present = [k for k in _EFFECTIVE if k in resource]
    if len(present) > 1:
        out.problem("structure", f"only one effective[x] is allowed, got {', '.join(present)}", at)
        return None
    key = present[0] if present else None
    if key == "effectivePeriod":
        period = member_object(resource, key, at, out)
        if period is None:
            return None
        for bound in ("start", "end"):
            value = text(period[0], bound, period[1], out)
            if value is not None:
                return _parse_time(value, f"{period[1]}.{bound}", out)
        return None
    if key in ("effectiveDateTime", "effectiveInstant"):
        value = text(resource, key, at, out)
        instant = key == "effectiveInstant"
        return None if value is None else _parse_time(value, f"{at}.{key}", out, instant=instant)
    issued = text(resource, "issued", at, out)
    if issued is None:
        return None
    out.issue(
        "time-from-issued",
        Severity.INFORMATION,
        "no effective time: the release time (issued) is used, which is later than the sample",
        f"{at}.issued",
    )
    return _parse_time(issued, f"{at}.issued", out, instant=True)


def _parse_time(value: str, at: str, out: Collector, *, instant: bool = False) -> datetime | None:
    try:
        when, precise = _date_time(value, instant)
    except ValueError as exc:
        out.problem("value", str(exc), at)
        return None
    if not precise:
        out.issue(
            "time-imprecise",
            Severity.WARNING,
            "a date without a time: taken as 00:00 UTC of that day; pairing by time is unreliable",
            at,
        )
    return when


def precise_time(text: str) -> datetime | None:
    """The time of a FHIR dateTime that has a time and a zone, else None.

    For the usual shape of an Observation's time: None covers a partial date and a bad value
    alike, and the caller then reads the element with ``effective_time``, which reports either.
    """
    try:
        value, precise = _date_time(text, False)
    except ValueError:
        return None
    return value if precise else None
