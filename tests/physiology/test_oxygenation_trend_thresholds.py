"""The course of oxygenation at its edges: the thresholds, the fitted line, equal FiO2 steps.

The fitted change is checked against numpy's least-squares polynomial fit (``numpy.polyfit``),
an independent implementation; the thresholds are the module's documented ones (20 % relative
for P/F and a/A, common practice; 5 points of admixture, common practice; 5 points of shunt,
Rowe L et al., Arch Dis Child Fetal Neonatal Ed 2010;95:F47). A change of exactly the threshold
is a change ("a change smaller than the threshold is stable"), whatever its floating-point
rest, and FiO2 0.30 to 0.40 varied by 0.10, not by more.
"""

from __future__ import annotations

from collections.abc import Mapping
from datetime import timedelta

import numpy as np
import pytest

from service.physiology.oxygenation_trend import (
    DEFAULT_THRESHOLDS,
    Direction,
    GasSummary,
    MeasureTrend,
    OxygenationTrend,
    Threshold,
    oxygenation_trend,
)
from tests.physiology.oxygen_points import START


def _gas(hours: float, fio2: float = 0.4, **values: float) -> GasSummary:
    return GasSummary(time=START + timedelta(hours=hours), fio2=fio2, **values)


def _measure(trend: OxygenationTrend, name: str) -> MeasureTrend:
    return next(m for m in trend.measures if m.measure == name)


def _series(name: str, hours: list[float], values: list[float]) -> list[GasSummary]:
    return [_gas(h, **{name: v}) for h, v in zip(hours, values, strict=True)]


def _direction(
    name: str,
    measure: str,
    values: list[float],
    thresholds: Mapping[str, Threshold] = DEFAULT_THRESHOLDS,
) -> Direction:
    hours = [6.0 * i for i in range(len(values))]
    trend = oxygenation_trend(summaries=_series(name, hours, values), thresholds=thresholds)
    return _measure(trend, measure).direction


@pytest.mark.parametrize(
    ("hours", "values"),
    [
        # Unequal spacing and more than three gases: the least-squares rise differs from the
        # last value minus the first (which it equals for three evenly spaced gases).
        ([0.0, 1.0, 5.0, 6.0], [0.20, 0.26, 0.24, 0.31]),
        ([0.0, 0.5, 2.0, 7.0, 8.0], [0.12, 0.30, 0.18, 0.15, 0.16]),
    ],
)
def test_the_change_is_the_rise_of_the_least_squares_line(
    hours: list[float], values: list[float]
) -> None:
    slope = np.polyfit(hours, values, 1)[0]  # numpy, independent least squares
    trend = oxygenation_trend(summaries=_series("venous_admixture", hours, values))
    admixture = _measure(trend, "venous_admixture")
    assert admixture.change == pytest.approx(slope * (hours[-1] - hours[0]), abs=1e-12)
    assert values[-1] - values[0] != pytest.approx(admixture.change, abs=1e-3)


def test_a_relative_threshold_is_taken_of_the_fitted_line_at_the_first_gas() -> None:
    # P/F 100, 150, 150, 150 at 0, 1, 2, 12 h: the line starts at 129.9 [numpy.polyfit] and
    # rises 24.3 over the span: stable against 20 % of the line's start (26.0), improving
    # against 20 % of the first value (20).
    hours, values = [0.0, 1.0, 2.0, 12.0], [100.0, 150.0, 150.0, 150.0]
    slope, intercept = np.polyfit(hours, values, 1)
    rise = slope * 12.0
    assert 0.2 * 100.0 < rise < 0.2 * intercept
    pf = _measure(oxygenation_trend(summaries=_series("pf_ratio_mmhg", hours, values)), "pf_ratio")
    assert pf.change == pytest.approx(rise)
    assert pf.direction is Direction.STABLE


@pytest.mark.parametrize(
    ("values", "direction"),
    [
        # 20 % of a P/F of 200 is 40 mmHg (common practice): falls of 39 and 41 mmHg.
        ([200.0, 180.5, 161.0], Direction.STABLE),
        ([200.0, 179.5, 159.0], Direction.WORSENING),
    ],
)
def test_pf_moves_at_twenty_percent_of_its_start(values: list[float], direction: Direction) -> None:
    assert _direction("pf_ratio_mmhg", "pf_ratio", values) is direction


@pytest.mark.parametrize(
    ("values", "direction"),
    [
        # A rising a/A ratio is an improvement; 20 % of 0.30 is 0.06.
        ([0.30, 0.3325, 0.365], Direction.IMPROVING),
        ([0.30, 0.3275, 0.355], Direction.STABLE),
        ([0.30, 0.2675, 0.235], Direction.WORSENING),
    ],
)
def test_the_aa_ratio_rises_as_oxygenation_improves(
    values: list[float], direction: Direction
) -> None:
    assert _direction("arterial_alveolar_ratio", "arterial_alveolar_ratio", values) is direction


@pytest.mark.parametrize("measure", ["venous_admixture", "shunt"])
@pytest.mark.parametrize(
    ("values", "direction"),
    [
        # Five percentage points, absolute (not 5 % of the first value): 4.7 points is stable,
        # 5.3 points is a change; exactly 5 points is a change whatever its rounding rest
        # (0.15 − 0.10 is 0.04999999999999999 in binary floating point).
        ([0.10, 0.1235, 0.147], Direction.STABLE),
        ([0.10, 0.1265, 0.153], Direction.WORSENING),
        ([0.10, 0.125, 0.15], Direction.WORSENING),
        ([0.20, 0.175, 0.15], Direction.IMPROVING),
        ([0.40, 0.3765, 0.353], Direction.STABLE),
    ],
)
def test_admixture_and_shunt_move_at_five_points(
    measure: str, values: list[float], direction: Direction
) -> None:
    assert _direction(measure, measure, values) is direction


def test_a_change_of_exactly_the_threshold_is_a_change() -> None:
    # A rule set's threshold of 10 mmHg of P/F; the line rises by exactly 10.
    own = {**DEFAULT_THRESHOLDS, "pf_ratio": Threshold(10.0, False, "a site's 10 mmHg")}
    assert _direction("pf_ratio_mmhg", "pf_ratio", [100.0, 105.0, 110.0], own) is (
        Direction.IMPROVING
    )
    assert _direction("pf_ratio_mmhg", "pf_ratio", [100.0, 104.0, 109.0], own) is (Direction.STABLE)


def test_no_change_is_stable_even_against_a_zero_threshold() -> None:
    # A threshold of 0 calls every change a change; an unchanged P/F is still not one.
    any_change = {**DEFAULT_THRESHOLDS, "pf_ratio": Threshold(0.0, False, "any change")}
    assert _direction("pf_ratio_mmhg", "pf_ratio", [150.0, 150.0, 150.0], any_change) is (
        Direction.STABLE
    )
    assert _direction("pf_ratio_mmhg", "pf_ratio", [150.0, 150.0, 150.5], any_change) is (
        Direction.IMPROVING
    )


def test_gases_at_one_instant_change_by_the_last_minus_the_first() -> None:
    gases = [_gas(0.0, venous_admixture=v) for v in (0.10, 0.30, 0.18)]
    admixture = _measure(oxygenation_trend(summaries=gases), "venous_admixture")
    assert admixture.change == pytest.approx(0.08)
    assert admixture.direction is Direction.WORSENING


@pytest.mark.parametrize(
    ("fio2s", "varied"),
    [
        ((0.30, 0.35, 0.40), False),  # exactly 0.10: not more than 0.10
        ((0.40, 0.45, 0.50), False),
        ((0.30, 0.35, 0.405), True),
        ((0.40, 0.40, 0.495), False),
        ((0.40, 0.40, 0.505), True),
    ],
)
def test_fio2_varied_means_by_more_than_ten_points(fio2s: tuple[float, ...], varied: bool) -> None:
    # P/F falling 40 % while the admixture stays put: P/F decides only when FiO2 did not vary.
    steps = list(enumerate(zip(fio2s, (200.0, 160.0, 120.0), strict=True)))
    gases = [_gas(6.0 * i, fio2=f, pf_ratio_mmhg=pf, venous_admixture=0.30) for i, (f, pf) in steps]
    trend = oxygenation_trend(summaries=gases)
    assert trend.direction is (Direction.STABLE if varied else Direction.WORSENING)
    assert ("Karbing" in trend.note) is varied
    alone = oxygenation_trend(
        summaries=[_gas(6.0 * i, fio2=f, pf_ratio_mmhg=pf) for i, (f, pf) in steps]
    )
    assert ("no measure that FiO2 does not move" in alone.note) is varied


@pytest.mark.parametrize("fio2", [0.10, 1.0])
def test_a_gas_on_the_ends_of_the_possible_fio2_is_accepted(fio2: float) -> None:
    # The intake range of an inspired oxygen fraction is 0.10–1.0, ends included (units.py).
    assert _gas(0.0, fio2=fio2).fio2 == fio2
