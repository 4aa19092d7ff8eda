"""The course of oxygenation over three or more gases."""

from __future__ import annotations

from datetime import datetime, timedelta

import pytest

from service.physiology.oxygenation_trend import (
    Direction,
    GasSummary,
    MeasureTrend,
    OxygenationTrend,
    oxygenation_trend,
)
from service.physiology.units import mmhg_from_kpa
from tests.physiology.oxygen_points import START


def _gas(hours: float, fio2: float = 0.4, **values: float) -> GasSummary:
    return GasSummary(time=START + timedelta(hours=hours), fio2=fio2, **values)


def _measure(trend: OxygenationTrend, name: str) -> MeasureTrend:
    return next(m for m in trend.measures if m.measure == name)


def test_a_falling_pf_and_rising_admixture_is_worsening() -> None:
    gases = [
        _gas(0, pf_ratio_mmhg=260.0, venous_admixture=0.15),
        _gas(6, pf_ratio_mmhg=210.0, venous_admixture=0.19),
        _gas(12, pf_ratio_mmhg=170.0, venous_admixture=0.24),
    ]
    trend = oxygenation_trend(summaries=gases)
    assert _measure(trend, "pf_ratio").direction is Direction.WORSENING
    assert _measure(trend, "venous_admixture").direction is Direction.WORSENING
    assert trend.direction is Direction.WORSENING
    assert [v for _, v in _measure(trend, "pf_ratio").series] == [260.0, 210.0, 170.0]


def test_the_series_is_in_time_order_whatever_order_the_gases_came_in() -> None:
    gases = [
        _gas(12, pf_ratio_mmhg=300.0),
        _gas(0, pf_ratio_mmhg=150.0),
        _gas(6, pf_ratio_mmhg=220.0),
    ]
    pf = _measure(oxygenation_trend(summaries=gases), "pf_ratio")
    assert [v for _, v in pf.series] == [150.0, 220.0, 300.0]
    assert pf.direction is Direction.IMPROVING


def test_a_change_inside_the_threshold_is_stable() -> None:
    # 20 % of a P/F of 200 is 40 mmHg (common practice): a fitted fall of 30 is stable.
    gases = [
        _gas(0, pf_ratio_mmhg=200.0),
        _gas(4, pf_ratio_mmhg=185.0),
        _gas(8, pf_ratio_mmhg=170.0),
    ]
    trend = oxygenation_trend(summaries=gases)
    pf = _measure(trend, "pf_ratio")
    assert pf.change == pytest.approx(-30.0)
    assert pf.direction is Direction.STABLE and trend.direction is Direction.STABLE
    assert pf.threshold.relative and "common practice" in pf.threshold.source


def test_the_fitted_parameters_use_the_method_agreement_of_rowe_2010() -> None:
    # ±5 points of shunt and 3 kPa of ΔPO2 (Rowe et al., Arch Dis Child Fetal Neonatal Ed
    # 2010;95:F47): a ΔPO2 rising 4 kPa is worsening, a shunt moving 3 points is stable.
    rise = mmhg_from_kpa(4.0)
    gases = [
        _gas(0, shunt=0.10, vq_drop_mmhg=20.0),
        _gas(8, shunt=0.12, vq_drop_mmhg=20.0 + rise / 2),
        _gas(16, shunt=0.13, vq_drop_mmhg=20.0 + rise),
    ]
    trend = oxygenation_trend(summaries=gases)
    assert _measure(trend, "vq_drop").direction is Direction.WORSENING
    assert _measure(trend, "shunt").direction is Direction.STABLE
    assert "Rowe" in _measure(trend, "shunt").threshold.source
    assert _measure(trend, "vq_drop").threshold.size == pytest.approx(22.5, abs=0.01)


def test_one_odd_gas_in_the_middle_does_not_decide_the_course() -> None:
    # The change is the rise of the least-squares line, not last minus first of a zigzag.
    gases = [
        _gas(0, venous_admixture=0.20),
        _gas(6, venous_admixture=0.35),
        _gas(12, venous_admixture=0.21),
    ]
    admixture = _measure(oxygenation_trend(summaries=gases), "venous_admixture")
    assert admixture.change == pytest.approx(0.01)
    assert admixture.direction is Direction.STABLE


def test_measures_that_disagree_or_too_few_values_are_unclear() -> None:
    gases = [
        _gas(0, pf_ratio_mmhg=150.0, shunt=0.10),
        _gas(6, pf_ratio_mmhg=200.0, shunt=0.18),
        _gas(12, pf_ratio_mmhg=260.0, shunt=0.25),
    ]
    trend = oxygenation_trend(summaries=gases)
    assert trend.direction is Direction.UNCLEAR and "disagree" in trend.note
    two = oxygenation_trend(summaries=gases[:2])
    assert two.direction is Direction.UNCLEAR
    assert all(m.direction is Direction.UNCLEAR and m.change is None for m in two.measures)


def test_a_varying_fio2_is_flagged_for_pf_and_aa() -> None:
    # Karbing 2007: P/F moves with FiO2 for an unchanged lung.
    gases = [
        _gas(0, fio2=0.3, pf_ratio_mmhg=250.0),
        _gas(4, fio2=0.5, pf_ratio_mmhg=200.0),
        _gas(8, fio2=0.7, pf_ratio_mmhg=160.0),
    ]
    trend = oxygenation_trend(summaries=gases)
    assert trend.fio2_range == pytest.approx(0.4)
    assert "Karbing" in trend.note and "fitted shunt" in trend.note


def test_a_gas_summary_needs_an_aware_time_and_a_possible_fio2() -> None:
    with pytest.raises(ValueError, match="timezone"):
        GasSummary(time=datetime(2025, 3, 1, 8, 0), fio2=0.4)
    with pytest.raises(ValueError, match="fio2"):
        GasSummary(time=START, fio2=40.0)


def test_a_rule_set_may_set_its_own_thresholds() -> None:
    from service.physiology.oxygenation_trend import DEFAULT_THRESHOLDS, Threshold

    gases = [
        _gas(0, pf_ratio_mmhg=200.0),
        _gas(4, pf_ratio_mmhg=185.0),
        _gas(8, pf_ratio_mmhg=170.0),
    ]
    tighter = {**DEFAULT_THRESHOLDS, "pf_ratio": Threshold(0.10, True, "a site's 10 %")}
    pf = _measure(oxygenation_trend(summaries=gases, thresholds=tighter), "pf_ratio")
    assert pf.direction is Direction.WORSENING and pf.threshold.source == "a site's 10 %"


def test_when_fio2_varied_pf_and_aa_are_shown_but_do_not_decide_the_course() -> None:
    # A pure shunt on rising FiO2: P/F falls with FiO2 alone while the admixture stays put
    # (Karbing DS et al., Crit Care 2007;11:R118; iso-shunt lines, Benatar 1973).
    gases = [
        _gas(0, fio2=0.4, pf_ratio_mmhg=128.0, arterial_alveolar_ratio=0.22, venous_admixture=0.34),
        _gas(1, fio2=0.6, pf_ratio_mmhg=93.0, arterial_alveolar_ratio=0.15, venous_admixture=0.34),
        _gas(2, fio2=1.0, pf_ratio_mmhg=71.0, arterial_alveolar_ratio=0.11, venous_admixture=0.35),
    ]
    trend = oxygenation_trend(summaries=gases)
    assert _measure(trend, "pf_ratio").direction is Direction.WORSENING
    assert _measure(trend, "venous_admixture").direction is Direction.STABLE
    assert trend.direction is Direction.STABLE
    assert "do not decide the course" in trend.note
    same_fio2 = [
        _gas(0, pf_ratio_mmhg=128.0, venous_admixture=0.34),
        _gas(6, pf_ratio_mmhg=93.0, venous_admixture=0.34),
        _gas(12, pf_ratio_mmhg=71.0, venous_admixture=0.35),
    ]
    assert oxygenation_trend(summaries=same_fio2).direction is Direction.WORSENING
