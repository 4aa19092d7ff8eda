"""Titration points at their edges: the window's ends and its default, FiO2 steps half a
percentage point apart, the values a point takes, and which gases lend their blood values.

The default window is the service's default setting (``Settings.titration_window_minutes``),
so that the physiology and the service do not hold two defaults. FiO2 is charted in whole
percent (common practice), so oximeter readings within half a point (0.005) of each other are
one step, whatever the floating-point rest of their difference (0.405 − 0.40 is
0.0050000000000000044).
"""

from __future__ import annotations

from datetime import datetime, timedelta

import pytest

from service.config import Settings
from service.exceptions import ImpossibleValueError
from service.physiology.bounds import CARBON_DIOXIDE_MMHG
from service.physiology.titration import (
    Fio2Source,
    InspiredOxygen,
    TitrationPoint,
    select_titration_points,
)
from tests.physiology.oxygen_points import START, inspired

WEEK_MIN = 7 * 24 * 60.0


def _at(minutes: float) -> datetime:
    return START + timedelta(minutes=minutes)


def test_the_default_window_is_the_services_default_setting() -> None:
    window = Settings().titration_window_minutes
    end = _at(1000.0)
    points = [
        TitrationPoint(end - timedelta(minutes=window + 5.0), inspired(0.21), spo2=0.86),
        TitrationPoint(end - timedelta(minutes=window - 5.0), inspired(0.28), spo2=0.90),
        TitrationPoint(end, inspired(0.4), pao2_mmhg=80.0, paco2_mmhg=40.0),
    ]
    series = select_titration_points(points=points)
    assert [p.time for p in series.points] == [p.time for p in points[1:]]
    assert [d.point.time for d in series.dropped] == [points[0].time]


def test_a_point_exactly_at_the_windows_start_is_kept() -> None:
    # "Earlier than window_min before the end" is dropped; exactly window_min is not earlier.
    points = [
        TitrationPoint(_at(0), inspired(0.21), spo2=0.86),
        TitrationPoint(_at(90), inspired(0.4), pao2_mmhg=80.0, paco2_mmhg=40.0),
    ]
    series = select_titration_points(points=points, window_min=90.0)
    assert len(series.points) == 2 and series.dropped == ()


@pytest.mark.parametrize("window", [1e-9, 1e-12, 1.0, WEEK_MIN])
def test_any_positive_window_up_to_a_week_is_taken(window: float) -> None:
    point = TitrationPoint(_at(0), inspired(0.4), pao2_mmhg=80.0, paco2_mmhg=40.0)
    assert select_titration_points(points=[point], window_min=window).points == (point,)


@pytest.mark.parametrize("window", [0.0, -1.0, WEEK_MIN + 1.0])
def test_a_window_not_positive_or_over_a_week_is_refused(window: float) -> None:
    with pytest.raises(ImpossibleValueError, match="window_min"):
        select_titration_points(points=[], window_min=window)


@pytest.mark.parametrize(
    ("first", "second", "steps"),
    [
        (0.40, 0.405, 1),  # half a point: one step
        (0.21, 0.215, 1),
        (0.28, 0.285, 1),
        (0.60, 0.595, 1),
        (0.40, 0.4055, 2),  # more than half a point: two steps
        (0.40, 0.396, 1),
        (0.40, 0.394, 2),
    ],
)
def test_readings_within_half_a_percentage_point_are_one_step(
    first: float, second: float, steps: int
) -> None:
    points = [
        TitrationPoint(_at(0), inspired(first), spo2=0.90),
        TitrationPoint(_at(1), inspired(second), spo2=0.92),
    ]
    assert len(select_titration_points(points=points).points) == steps


def test_half_the_range_of_a_device_estimate() -> None:
    # A nasal cannula's 0.26–0.54 at 1–6 L/min (Wettstein, Shelledy & Peters 2005): ±0.14.
    cannula = InspiredOxygen(0.40, 0.26, 0.54, Fio2Source.DEVICE_ESTIMATE)
    assert cannula.half_range == pytest.approx(0.14)
    assert inspired(0.4).half_range == 0.0


def test_the_fio2_span_of_two_points_and_of_one() -> None:
    two = [
        TitrationPoint(_at(0), inspired(0.28), spo2=0.90),
        TitrationPoint(_at(5), inspired(0.40), pao2_mmhg=75.0, paco2_mmhg=40.0),
    ]
    assert select_titration_points(points=two).fio2_span == pytest.approx(0.12)
    assert select_titration_points(points=two[:1]).fio2_span == 0.0


@pytest.mark.parametrize("pressure", [1.0, 40.0, CARBON_DIOXIDE_MMHG[1]])
def test_a_paco2_the_intake_accepts_from_1_mmhg_is_taken(pressure: float) -> None:
    # The upper end is the intake's possible PaCO2 (bounds.CARBON_DIOXIDE_MMHG); PaO2 and
    # PaCO2 below 1 mm[Hg] are outside what the model takes.
    point = TitrationPoint(_at(0), inspired(0.4), pao2_mmhg=1.0, paco2_mmhg=pressure)
    assert (point.pao2_mmhg, point.paco2_mmhg) == (1.0, pressure)


@pytest.mark.parametrize(
    ("pao2", "paco2", "name"),
    [
        (0.95, None, "pao2_mmhg"),
        (70.0, 0.95, "paco2_mmhg"),
        (70.0, CARBON_DIOXIDE_MMHG[1] + 1.0, "paco2_mmhg"),
    ],
)
def test_pressures_outside_what_the_model_takes_are_refused(
    pao2: float, paco2: float | None, name: str
) -> None:
    with pytest.raises(ImpossibleValueError, match=name):
        TitrationPoint(_at(0), inspired(0.4), pao2_mmhg=pao2, paco2_mmhg=paco2)


def test_only_a_gas_with_a_paco2_lends_its_blood_values() -> None:
    # The nearest arterial sample has no PaCO2, and an oximeter reading carrying one is not a
    # gas: the saturation borrows from the gas that has one.
    points = [
        TitrationPoint(_at(0), inspired(0.3), pao2_mmhg=60.0, paco2_mmhg=50.0, ph=7.33),
        TitrationPoint(_at(40), inspired(0.35), spo2=0.91),
        TitrationPoint(_at(45), inspired(0.4), pao2_mmhg=70.0),
        TitrationPoint(_at(48), inspired(0.5), spo2=0.93, paco2_mmhg=30.0),
    ]
    series = select_titration_points(points=points)
    reading = next(p for p in series.points if p.time == _at(40))
    assert (reading.paco2_mmhg, reading.ph, reading.blood_from) == (50.0, 7.33, _at(0))
