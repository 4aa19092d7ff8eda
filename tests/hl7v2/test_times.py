"""HL7 v2 DTM values (HL7 v2.5 chapter 2A, DTM: YYYY[MM[DD[HH[MM[SS[.S[S[S[S]]]]]]]]][+/-ZZZZ])."""

from __future__ import annotations

from datetime import UTC, date, datetime, timedelta, timezone

import pytest

from service.hl7v2.times import format_dtm, parse_birth_date, parse_dtm, zone_of

CET = timezone(timedelta(hours=1))


def test_full_precision_with_offset() -> None:
    when = parse_dtm("20260105101530.1234+0100")
    assert when.value == datetime(2026, 1, 5, 10, 15, 30, 123400, tzinfo=CET)
    assert when.precise and when.zoned


def test_no_offset_takes_the_default_zone_else_utc() -> None:
    assert parse_dtm("202601051015", CET).value.tzinfo == CET
    unzoned = parse_dtm("202601051015")
    assert unzoned.value.tzinfo == UTC and not unzoned.zoned


@pytest.mark.parametrize("text", ["2026", "202601", "20260105", "2026010510"])
def test_less_than_minutes_is_imprecise(text: str) -> None:
    assert not parse_dtm(text).precise


@pytest.mark.parametrize(
    "text", ["", "26", "20261", "20260230", "202601052500", "20260105+2500", "2026-01-05"]
)
def test_not_a_dtm_is_refused(text: str) -> None:
    with pytest.raises(ValueError):
        parse_dtm(text)


def test_birth_date_and_zone_and_format() -> None:
    assert parse_birth_date("19610412") == (date(1961, 4, 12), True)
    assert parse_birth_date("196104") == (date(1961, 4, 1), False)
    assert zone_of("20260105101500-0500") == timezone(-timedelta(hours=5))
    assert zone_of("20260105101500") is None
    assert format_dtm(datetime(2026, 1, 5, 10, 15, tzinfo=CET)) == "20260105101500+0100"
