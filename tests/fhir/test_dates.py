"""FHIR dateTime, instant and date parsing (R4 datatypes: a time needs a zone)."""

from __future__ import annotations

from datetime import UTC, date, datetime, timedelta, timezone

import pytest

from service.fhir.dates import When, parse_date, parse_date_time


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("2026-01-05T10:00:00Z", When(datetime(2026, 1, 5, 10, tzinfo=UTC), True)),
        (
            "2026-01-05T10:00:00.5-05:30",
            When(
                datetime(
                    2026, 1, 5, 10, 0, 0, 500000, tzinfo=timezone(-timedelta(hours=5, minutes=30))
                ),
                True,
            ),
        ),
        ("2026-01-05", When(datetime(2026, 1, 5, tzinfo=UTC), False)),
        ("2026-01", When(datetime(2026, 1, 1, tzinfo=UTC), False)),
        ("2026", When(datetime(2026, 1, 1, tzinfo=UTC), False)),
    ],
)
def test_date_time_forms(text: str, expected: When) -> None:
    assert parse_date_time(text) == expected


@pytest.mark.parametrize(
    "text",
    [
        "2026-01-05T10:00:00",  # a time without a zone
        "2026-01-05T10:00Z",  # seconds are required
        "2026-01-05 10:00:00Z",
        "2026-02-29",  # not a leap year
        "2026-01-05T24:00:00Z",
        "2026-01-05T10:00:00+15:00",  # offsets stop at 14:00
        "0000-01-01",
        "26-01-05",
        "",
    ],
)
def test_bad_date_time_is_refused(text: str) -> None:
    with pytest.raises(ValueError, match=r"FHIR|out of range|must be in|year"):
        parse_date_time(text)


def test_instant_needs_a_time() -> None:
    with pytest.raises(ValueError, match="instant"):
        parse_date_time("2026-01-05", instant=True)


def test_date_forms() -> None:
    assert parse_date("1961-04-12") == (date(1961, 4, 12), True)
    assert parse_date("1961-04") == (date(1961, 4, 1), False)
    assert parse_date("1961") == (date(1961, 1, 1), False)
    with pytest.raises(ValueError, match="FHIR date"):
        parse_date("1961-04-12T00:00:00Z")
