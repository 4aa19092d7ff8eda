"""Severinghaus 1979's temperature coefficient along the whole curve, the curve's slope at its
foot, and the range of P50 the module accepts.

Eq. 3 as published (Severinghaus JW, Simple, accurate equations for human blood O2
dissociation computations, J Appl Physiol 1979;46:599, abstract):

    Δ ln PO2 / ΔT = 0.058 ((0.243 × PO2 / 100)^3.88 + 1)^−1 + 0.013

At the P50 the bracket is 1 to five decimals, so only PO2s on the flat part of the curve show
whether its coefficients are right.
"""

from __future__ import annotations

import math

import pytest

from service.exceptions import ImpossibleValueError
from service.physiology.oxygen_affinity import (
    oxygen_affinity,
    standard_saturation,
    standard_saturation_slope,
    temperature_coefficient_per_cel,
)


def _eq_3(po2: float) -> float:
    """Severinghaus 1979 eq. 3, written as the abstract prints it."""
    return 0.058 * math.pow(math.pow(0.243 * po2 / 100.0, 3.88) + 1.0, -1.0) + 0.013


@pytest.mark.parametrize("po2", [60.0, 100.0, 150.0, 300.0, 600.0])
def test_the_temperature_coefficient_is_eq_3_along_the_curve(po2: float) -> None:
    assert temperature_coefficient_per_cel(po2_mmhg=po2) == pytest.approx(_eq_3(po2), rel=1e-12)


def test_the_temperature_coefficient_falls_towards_0_013_as_the_blood_saturates() -> None:
    # Eq. 3's two ends: 0.058 + 0.013 = 0.071 per °C at low PO2, 0.013 at high PO2 where the
    # dissolved oxygen dominates. At 83 % saturation (PO2 48 on eq. 1) it is 0.0308 in log10
    # [calc]; measured in vitro: 0.032 at 83 % (Hedley-Whyte J & Laver MB, J Appl Physiol
    # 1964;19:901; authors and page from memory).
    in_log10 = temperature_coefficient_per_cel(po2_mmhg=48.0) / 2.302585
    assert in_log10 == pytest.approx(0.032, abs=0.0015)
    coefficients = [temperature_coefficient_per_cel(po2_mmhg=p) for p in (50, 100, 200, 400, 800)]
    assert coefficients == sorted(coefficients, reverse=True)
    assert 0.013 < temperature_coefficient_per_cel(po2_mmhg=5000.0) < 0.0131


def test_the_slope_at_zero_po2_is_the_curves_limit_there() -> None:
    # dS/dPO2 at PO2 → 0 of S = x / (x + 23400), x = PO2³ + 150 PO2: 150 / 23400 (eq. 1).
    assert standard_saturation_slope(0.0) == pytest.approx(150.0 / 23400.0, rel=1e-12)
    h = 1e-7
    assert standard_saturation_slope(0.0) == pytest.approx(
        (standard_saturation(h) - standard_saturation(0.0)) / h, rel=1e-6
    )
    assert standard_saturation_slope(0.0) == pytest.approx(standard_saturation_slope(1e-9))


@pytest.mark.parametrize("p50", [10.0, 19.0, 26.86, 45.0, 60.0])
def test_a_p50_from_10_to_60_mmhg_is_possible(p50: float) -> None:
    # The module's possible range (foetal blood, about 19 mmHg, to an extreme right shift),
    # ends included, for a measured P50 and for a standardised one.
    assert oxygen_affinity(measured_p50_mmhg=p50).p50_mmhg == p50
    assert oxygen_affinity(standard_p50_mmhg=p50).standard_p50_mmhg == p50


@pytest.mark.parametrize("p50", [9.5, 63.0])
def test_a_p50_outside_10_to_60_mmhg_is_refused(p50: float) -> None:
    with pytest.raises(ImpossibleValueError, match="measured_p50_mmhg"):
        oxygen_affinity(measured_p50_mmhg=p50)
    with pytest.raises(ImpossibleValueError, match="standard_p50_mmhg"):
        oxygen_affinity(standard_p50_mmhg=p50)
