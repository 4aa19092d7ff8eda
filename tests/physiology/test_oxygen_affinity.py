"""The P50 from pH, PaCO2 and temperature, and the curve shifted to it."""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from service.exceptions import ImpossibleValueError
from service.physiology.oxygen_affinity import (
    STANDARD_AFFINITY,
    STANDARD_P50_MMHG,
    bohr_coefficient,
    oxygen_affinity,
    standard_po2,
    standard_saturation,
    standard_saturation_slope,
    temperature_coefficient_per_cel,
)
from service.physiology.saturation import po2_from_saturation, saturation_from_po2


def test_the_standard_curve_is_severinghaus_eq_1() -> None:
    # The kernels are the checked functions of saturation.py without their input checks.
    for po2 in (5.0, 26.86, 40.0, 60.0, 100.0, 300.0, 650.0):
        assert standard_saturation(po2) == pytest.approx(saturation_from_po2(po2_mmhg=po2))
    for s in (0.1, 0.5, 0.75, 0.9, 0.97, 0.999):
        assert standard_po2(s) == pytest.approx(po2_from_saturation(saturation=s), rel=1e-9)
    assert STANDARD_AFFINITY.saturation(po2_mmhg=STANDARD_P50_MMHG) == pytest.approx(0.5, abs=1e-4)


@given(st.floats(min_value=1.0, max_value=1000.0))
def test_the_slope_is_the_derivative_of_the_curve(po2: float) -> None:
    h = 1e-4 * po2
    numeric = (standard_saturation(po2 + h) - standard_saturation(po2 - h)) / (2 * h)
    assert standard_saturation_slope(po2) == pytest.approx(numeric, rel=1e-5, abs=1e-12)


@pytest.mark.parametrize("saturation", [0.999, 0.9999, 0.99999])
def test_the_inverse_keeps_its_digits_near_full_saturation(saturation: float) -> None:
    # Cardano's b − a loses digits as S → 1; the kernel computes it as q / (b + a). The round
    # trip must hold to 1e-12 where the naive form drifts by 1e-9 [calc].
    po2 = standard_po2(saturation)
    assert standard_saturation(po2) == pytest.approx(saturation, abs=1e-13)
    x = po2 * (po2 * po2 + 150.0)
    assert x / (x + 23400.0) == pytest.approx(saturation, abs=1e-13)


def _p50_by_integrating_eq_4(delta_ph: float) -> float:
    """Severinghaus 1979 eq. 4, d ln PO2 / d pH = (PO2/26.6)^0.184 − 2.2, integrated by RK4
    from the standard P50."""
    return _p50_by_integrating_eq_4_from(STANDARD_P50_MMHG, delta_ph)


@pytest.mark.parametrize("ph", [6.9, 7.1, 7.25, 7.55, 7.7])
def test_ph_moves_the_p50_by_severinghaus_eq_4(ph: float) -> None:
    # The closed form equals a numerical integration of the published equation.
    assert oxygen_affinity(ph=ph).p50_mmhg == pytest.approx(
        _p50_by_integrating_eq_4(ph - 7.40), rel=1e-9
    )


def test_the_bohr_coefficient_at_the_p50() -> None:
    # Eq. 4 at PO2 26.86: (26.86/26.6)^0.184 − 2.2 = −1.198 per pH unit in ln, i.e.
    # Δlog10 P50 / ΔpH = −0.520 [calc]; close to the classic CO2 Bohr factor −0.48 (from memory).
    assert bohr_coefficient(po2_mmhg=STANDARD_P50_MMHG) == pytest.approx(-1.198, abs=0.001)
    shift = math.log10(oxygen_affinity(ph=7.30).p50_mmhg / STANDARD_P50_MMHG) / -0.10
    assert shift == pytest.approx(-0.52, abs=0.01)


def test_temperature_moves_the_p50_by_severinghaus_eq_3() -> None:
    # Eq. 3 at the P50: 0.058 / ((0.243 × 0.2686)^3.88 + 1) + 0.013 = 0.0710 per °C in ln,
    # 0.0308 in log10 — the classic low-saturation coefficient 0.031 (from memory) [calc].
    assert temperature_coefficient_per_cel(po2_mmhg=STANDARD_P50_MMHG) == pytest.approx(
        0.0710, abs=0.0001
    )
    assert oxygen_affinity(temperature_cel=39.0).p50_mmhg == pytest.approx(
        STANDARD_P50_MMHG * math.exp(0.0710 * 2.0), rel=1e-3
    )
    assert oxygen_affinity(temperature_cel=35.0).p50_mmhg < STANDARD_P50_MMHG


def test_a_paco2_without_ph_implies_an_acute_respiratory_ph() -> None:
    # PaCO2 60 acute: HCO3 24 + 0.1 × 20 = 26 (Narins & Emmett 1980), [H+] = 24 × 60 / 26 =
    # 55.4 against 40 nmol/L at normal, pH 7.40 − log10(55.4 / 40) = 7.259 (Henderson) [calc];
    # the P50 is then as for that pH.
    by_paco2 = oxygen_affinity(paco2_mmhg=60.0)
    ph = 7.40 - math.log10(24.0 * 60.0 / 26.0 / 40.0)
    assert ph == pytest.approx(7.259, abs=0.001)
    assert by_paco2.p50_mmhg == pytest.approx(oxygen_affinity(ph=ph).p50_mmhg)
    assert "implied by PaCO2" in by_paco2.method
    assert oxygen_affinity(paco2_mmhg=40.0).p50_mmhg == pytest.approx(STANDARD_P50_MMHG)


def test_the_p50_agrees_with_the_classic_virtual_po2_factors() -> None:
    # Kelman GR, J Appl Physiol 1966 / Severinghaus 1966 virtual PO2 (from memory):
    # PO2 × 10^[0.40 (pH − 7.40) + 0.024 (37 − T) + 0.06 log10(40 / PCO2)]. For PaCO2 60 acute
    # (pH 7.259) it gives P50 31.4; eq. 4 gives 31.8 — within 3 % [calc]. For 39 °C it gives
    # 30.0 against eq. 3's 31.0: the two temperature coefficients differ (0.024 vs 0.031).
    ph = 7.40 - math.log10(24.0 * 60.0 / 26.0 / 40.0)
    kelman = STANDARD_P50_MMHG / 10 ** (0.40 * (ph - 7.40) + 0.06 * math.log10(40.0 / 60.0))
    assert oxygen_affinity(paco2_mmhg=60.0).p50_mmhg == pytest.approx(kelman, rel=0.03)
    kelman_39 = STANDARD_P50_MMHG / 10 ** (0.024 * (37.0 - 39.0))
    assert oxygen_affinity(temperature_cel=39.0).p50_mmhg == pytest.approx(kelman_39, rel=0.04)


def test_the_shifted_curve_is_the_standard_curve_scaled_to_its_p50() -> None:
    affinity = oxygen_affinity(ph=7.2, temperature_cel=38.5)
    assert affinity.saturation(po2_mmhg=affinity.p50_mmhg) == pytest.approx(0.5, abs=1e-3)
    for s in (0.3, 0.7, 0.9, 0.95):
        assert affinity.saturation(po2_mmhg=affinity.po2_mmhg(saturation=s)) == pytest.approx(s)
    assert "eq. 4" in affinity.method and "eq. 3" in affinity.method


def test_a_measured_p50_wins_and_nothing_known_is_the_standard_curve() -> None:
    assert oxygen_affinity(measured_p50_mmhg=19.0, ph=7.1).p50_mmhg == 19.0
    assert oxygen_affinity() is STANDARD_AFFINITY


def test_impossible_blood_is_refused() -> None:
    with pytest.raises(ImpossibleValueError, match="ph"):
        oxygen_affinity(ph=9.1)
    with pytest.raises(ImpossibleValueError, match="temperature_cel"):
        oxygen_affinity(temperature_cel=60.0)
    with pytest.raises(ImpossibleValueError, match="measured_p50_mmhg"):
        oxygen_affinity(measured_p50_mmhg=3.0)


def test_shifts_start_from_the_bloods_own_standard_p50() -> None:
    # A laboratory's standardised P50 (pH 7.40, 37 °C) is the base the pH and temperature
    # shifts start from; a P50 measured in vivo is final.
    foetal = oxygen_affinity(standard_p50_mmhg=19.0)
    assert foetal.p50_mmhg == 19.0 and foetal.standard_p50_mmhg == 19.0
    assert oxygen_affinity(ph=7.30, standard_p50_mmhg=19.0).p50_mmhg == pytest.approx(
        _p50_by_integrating_eq_4_from(19.0, -0.10), rel=1e-9
    )
    measured = oxygen_affinity(measured_p50_mmhg=31.0)
    assert measured.in_vivo and not STANDARD_AFFINITY.in_vivo
    with pytest.raises(ImpossibleValueError, match="standard_p50_mmhg"):
        oxygen_affinity(standard_p50_mmhg=80.0)


def _p50_by_integrating_eq_4_from(p50: float, delta_ph: float) -> float:
    """Eq. 4 integrated by RK4 from ``p50``."""
    u = math.log(p50)
    steps = 2000
    h = delta_ph / steps

    def f(v: float) -> float:
        return math.pow(math.exp(v) / 26.6, 0.184) - 2.2

    for _ in range(steps):
        k1 = f(u)
        k2 = f(u + h * k1 / 2)
        k3 = f(u + h * k2 / 2)
        k4 = f(u + h * k3)
        u += h * (k1 + 2 * k2 + 2 * k3 + k4) / 6
    return math.exp(u)
