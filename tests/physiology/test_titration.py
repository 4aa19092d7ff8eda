"""Titration points: the record, the window, oximetry steps and borrowed blood values."""

from __future__ import annotations

from datetime import datetime, timedelta

import pytest

from service.exceptions import ImpossibleValueError
from service.physiology.titration import (
    Fio2Source,
    InspiredOxygen,
    MeasuredKind,
    TitrationPoint,
    select_titration_points,
)
from tests.physiology.oxygen_points import START, inspired


def _at(minutes: float) -> datetime:
    return START + timedelta(minutes=minutes)


def test_a_point_holds_exactly_one_measurement() -> None:
    spo2 = TitrationPoint(START, inspired(0.3), spo2=0.91)
    assert spo2.kind is MeasuredKind.SPO2 and spo2.value == 0.91 and not spo2.is_gas
    gas = TitrationPoint(START, inspired(0.3), pao2_mmhg=70.0, paco2_mmhg=42.0)
    assert gas.kind is MeasuredKind.PAO2 and gas.is_gas
    assert TitrationPoint(START, inspired(0.3), sao2=0.93).kind is MeasuredKind.SAO2
    with pytest.raises(ValueError, match="exactly one"):
        TitrationPoint(START, inspired(0.3), spo2=0.91, pao2_mmhg=70.0)
    with pytest.raises(ValueError, match="exactly one"):
        TitrationPoint(START, inspired(0.3))


def test_impossible_points_are_refused_with_their_name() -> None:
    with pytest.raises(ImpossibleValueError, match="spo2"):
        TitrationPoint(START, inspired(0.3), spo2=91.0)  # a percentage sent as a fraction
    with pytest.raises(ImpossibleValueError, match="paco2_mmhg"):
        TitrationPoint(START, inspired(0.3), pao2_mmhg=70.0, paco2_mmhg=0.0)
    with pytest.raises(ImpossibleValueError, match="fio2"):
        InspiredOxygen(0.5, 0.2, 0.4, Fio2Source.DEVICE_ESTIMATE)  # outside its own range
    with pytest.raises(ValueError, match="timezone"):
        TitrationPoint(datetime(2025, 3, 1, 8, 0), inspired(0.3), spo2=0.9)


def test_the_window_ends_at_the_latest_point_and_drops_older_ones_with_the_reason() -> None:
    points = [
        TitrationPoint(_at(130), inspired(0.4), pao2_mmhg=80.0, paco2_mmhg=40.0),
        TitrationPoint(_at(0), inspired(0.21), spo2=0.86),  # 130 min before the end
        TitrationPoint(_at(20), inspired(0.28), spo2=0.90),
        TitrationPoint(_at(60), inspired(0.35), spo2=0.93),
    ]
    series = select_titration_points(points=points, window_min=120.0)
    assert [p.time for p in series.points] == [_at(20), _at(60), _at(130)]  # time order
    assert [d.point.time for d in series.dropped] == [_at(0)]
    assert "120 min" in series.dropped[0].reason
    assert series.window_end == _at(130) and series.window_start == _at(10)
    assert series.fio2_span == pytest.approx(0.4 - 0.28)


def test_an_anchor_ends_the_window_and_later_points_are_dropped() -> None:
    points = [
        TitrationPoint(_at(0), inspired(0.21), spo2=0.86),
        TitrationPoint(_at(30), inspired(0.3), pao2_mmhg=62.0, paco2_mmhg=44.0),
        TitrationPoint(_at(90), inspired(0.5), spo2=0.95),
    ]
    series = select_titration_points(points=points, window_min=60.0, anchor=_at(30))
    assert [p.time for p in series.points] == [_at(0), _at(30)]
    assert series.dropped[0].reason == "after the end of the titration window"


def test_a_gas_may_come_first_and_every_point_is_kept() -> None:
    # Whichever came first, gas or oximetry, all points in the window are used (more than two).
    points = [
        TitrationPoint(_at(0), inspired(0.3), pao2_mmhg=58.0, paco2_mmhg=45.0),
        TitrationPoint(_at(15), inspired(0.4), spo2=0.92),
        TitrationPoint(_at(30), inspired(0.5), pao2_mmhg=81.0, paco2_mmhg=47.0),
        TitrationPoint(_at(45), inspired(0.6), spo2=0.96),
    ]
    series = select_titration_points(points=points)
    assert len(series.points) == 4 and series.points[0].is_gas


def test_a_run_of_oximetry_on_one_fio2_is_one_step_with_its_median() -> None:
    points = [
        TitrationPoint(_at(0), inspired(0.28), spo2=0.88),
        TitrationPoint(_at(1), inspired(0.28), spo2=0.90),
        TitrationPoint(_at(2), inspired(0.28), spo2=0.79),  # a motion artefact
        TitrationPoint(_at(3), inspired(0.28), pao2_mmhg=60.0, paco2_mmhg=41.0),
        TitrationPoint(_at(4), inspired(0.28), spo2=0.89),
        TitrationPoint(_at(10), inspired(0.35), spo2=0.93),
        TitrationPoint(_at(11), inspired(0.35), spo2=0.94),
    ]
    series = select_titration_points(points=points)
    oximetry = [p for p in series.points if p.spo2 is not None]
    assert [(p.spo2, p.readings, p.time) for p in oximetry] == [
        (0.885, 4, _at(4)),  # median of 0.88, 0.90, 0.79, 0.89; the gas did not break the run
        (0.935, 2, _at(11)),
    ]
    assert len(series.points) == 3


def test_oximetry_borrows_paco2_ph_and_temperature_from_the_nearest_gas() -> None:
    points = [
        TitrationPoint(_at(0), inspired(0.21), spo2=0.85),
        TitrationPoint(
            _at(20), inspired(0.3), pao2_mmhg=60.0, paco2_mmhg=52.0, ph=7.31, temperature_cel=38.2
        ),
        TitrationPoint(_at(100), inspired(0.5), pao2_mmhg=90.0, paco2_mmhg=58.0, ph=7.28),
        TitrationPoint(_at(90), inspired(0.4), spo2=0.94),
    ]
    series = select_titration_points(points=points)
    first, _, near_last, _ = series.points
    assert (first.paco2_mmhg, first.ph, first.temperature_cel) == (52.0, 7.31, 38.2)
    assert first.blood_from == _at(20)
    assert (near_last.paco2_mmhg, near_last.ph, near_last.blood_from) == (58.0, 7.28, _at(100))
    alone = select_titration_points(points=[TitrationPoint(_at(0), inspired(0.3), spo2=0.9)])
    assert alone.points[0].paco2_mmhg is None and alone.points[0].blood_from is None


def test_an_empty_record_gives_an_empty_series_and_a_bad_window_is_refused() -> None:
    empty = select_titration_points(points=[])
    assert empty.points == () and empty.window_end is None and empty.fio2_span == 0.0
    with pytest.raises(ImpossibleValueError, match="window_min"):
        select_titration_points(points=[], window_min=0.0)
