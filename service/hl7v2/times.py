"""HL7 v2 date/time values (DTM, and TS component 1) as aware Python datetimes.

DTM is ``YYYY[MM[DD[HH[MM[SS[.S[S[S[S]]]]]]]]][+/-ZZZZ]``. A value without an offset is in the
sender's local time; the offset of MSH-7 is taken for it when MSH-7 has one, otherwise UTC,
and the caller reports that assumption (``time-zone-assumed``). A value without minutes is
kept with ``precise=False``, as the FHIR adapter does for a date without a time, so pairing
by time is flagged as unreliable instead of pretending to know the minute.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta, timezone, tzinfo

_DTM = re.compile(
    r"(?P<year>\d{4})(?:(?P<month>\d{2})(?:(?P<day>\d{2})(?:(?P<hour>\d{2})(?:(?P<minute>\d{2})"
    r"(?:(?P<second>\d{2})(?:\.(?P<fraction>\d{1,4}))?)?)?)?)?)?(?P<zone>[+-]\d{4})?",
    re.ASCII,
)
DTM_FORM = "YYYY[MM[DD[HH[MM[SS[.SSSS]]]]]][+/-ZZZZ]"


@dataclass(frozen=True, slots=True)
class V2Time:
    """A parsed DTM: ``precise`` needs minutes; ``zoned`` says the offset was sent."""

    value: datetime
    precise: bool
    zoned: bool


def zone_of(text: str) -> tzinfo | None:
    """The offset a DTM carries, or None (no offset, or not a DTM)."""
    match = _DTM.fullmatch(text.strip())
    if match is None or match.group("zone") is None:
        return None
    try:
        return _zone(match.group("zone"))
    except ValueError:
        return None


def _zone(text: str) -> timezone:
    hours, minutes = int(text[1:3]), int(text[3:5])
    if hours > 14 or minutes > 59:
        raise ValueError("time-zone offset out of range")
    sign = -1 if text[0] == "-" else 1
    return timezone(sign * timedelta(hours=hours, minutes=minutes))


def parse_dtm(text: str, default_zone: tzinfo | None = None) -> V2Time:
    """Parse a DTM; a value without an offset takes ``default_zone`` (UTC when None).

    Raises:
        ValueError: not a DTM, or not a real calendar time.
    """
    match = _DTM.fullmatch(text.strip())
    if match is None:
        raise ValueError(f"not an HL7 v2 date/time: expected {DTM_FORM}")
    g = match.groupdict()
    zone_text = g["zone"]
    zone = _zone(zone_text) if zone_text else (default_zone or UTC)
    fraction = (g["fraction"] or "").ljust(6, "0")
    value = datetime(
        int(g["year"]),
        int(g["month"] or 1),
        int(g["day"] or 1),
        int(g["hour"] or 0),
        int(g["minute"] or 0),
        int(g["second"] or 0),
        int(fraction),
        tzinfo=zone,
    )
    return V2Time(value, precise=g["minute"] is not None, zoned=zone_text is not None)


def parse_birth_date(text: str) -> tuple[date, bool]:
    """PID-7 as (date, whether the day was given); the time part is dropped (V2-to-FHIR
    puts it in an extension of ``Patient.birthDate``).

    Raises:
        ValueError: not a DTM, or not a real calendar date.
    """
    match = _DTM.fullmatch(text.strip())
    if match is None:
        raise ValueError(f"not an HL7 v2 date/time: expected {DTM_FORM}")
    year, month, day = match.group("year", "month", "day")
    return date(int(year), int(month or 1), int(day or 1)), day is not None


def format_dtm(value: datetime) -> str:
    """A DTM to the second with its offset, e.g. ``20261121140500+0000``."""
    offset = value.utcoffset() or timedelta(0)
    sign = "-" if offset < timedelta(0) else "+"
    minutes = abs(int(offset.total_seconds())) // 60
    return value.strftime("%Y%m%d%H%M%S") + f"{sign}{minutes // 60:02d}{minutes % 60:02d}"
