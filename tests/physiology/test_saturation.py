"""The Severinghaus 1979 dissociation curve and its exact inverse."""

from __future__ import annotations

import pytest

from service.exceptions import ImpossibleValueError, OutsideModelRangeError
from service.physiology.saturation import (
    impute_pao2_from_spo2,
    po2_from_saturation,
    saturation_from_po2,
)


def test_p50_of_the_standard_curve() -> None:
    # Severinghaus 1979: standard P50 26.8 mmHg; the equation's exact P50 is 26.86 [CALC].
    assert po2_from_saturation(saturation=0.5) == pytest.approx(26.86, abs=0.01)
    assert po2_from_saturation(saturation=0.5) == pytest.approx(26.8, abs=0.1)


@pytest.mark.parametrize(
    ("po2", "published_percent"),
    [
        # Severinghaus 1979 Table 1 (standard curve data, as two secondary sources reproduce
        # them). The paper's abstract states eq. 1 fits within ±0.0055 saturation.
        (26.0, 48.27),
        (30.0, 57.54),
        (40.0, 74.69),
        (50.0, 85.08),
        (60.0, 90.85),
        (70.0, 94.06),
        (80.0, 95.84),
        (90.0, 96.88),
        (100.0, 97.49),
    ],
)
def test_curve_fits_the_published_table_within_the_stated_error(
    po2: float, published_percent: float
) -> None:
    assert saturation_from_po2(po2_mmhg=po2) == pytest.approx(published_percent / 100, abs=0.0055)


@pytest.mark.parametrize(
    ("po2", "percent"),
    # Check values [calc] of Severinghaus 1979 eq. 1.
    [(20.0, 31.98), (60.0, 90.58), (100.0, 97.75), (150.0, 99.32), (600.0, 99.99)],
)
def test_curve_worked_values(po2: float, percent: float) -> None:
    assert saturation_from_po2(po2_mmhg=po2) * 100 == pytest.approx(percent, abs=0.005)


@pytest.mark.parametrize(
    ("saturation", "po2"),
    # Check values [calc] of the exact (Cardano) inverse of eq. 1 (Ellis RK, J Appl Physiol
    # 1989;67:902).
    [(0.75, 40.04), (0.88, 54.67), (0.90, 58.66), (0.92, 63.79), (0.94, 70.87), (0.96, 81.90)],
)
def test_exact_inverse_worked_values(saturation: float, po2: float) -> None:
    assert po2_from_saturation(saturation=saturation) == pytest.approx(po2, abs=0.01)


def test_imputation_refuses_spo2_above_96_percent() -> None:
    # Brown et al., Chest 2016;150:307: nonlinear imputation only for SpO2 ≤ 96 %.
    assert impute_pao2_from_spo2(spo2=0.96) == pytest.approx(81.90, abs=0.01)
    with pytest.raises(OutsideModelRangeError, match="imputation"):
        impute_pao2_from_spo2(spo2=0.97)


@pytest.mark.parametrize("saturation", [0.0, 1.0, -0.1, 1.2])
def test_inverse_rejects_saturations_without_a_finite_po2(saturation: float) -> None:
    with pytest.raises(ImpossibleValueError, match="saturation"):
        po2_from_saturation(saturation=saturation)


def test_curve_rejects_negative_po2() -> None:
    with pytest.raises(ImpossibleValueError, match="po2_mmhg"):
        saturation_from_po2(po2_mmhg=-1.0)
