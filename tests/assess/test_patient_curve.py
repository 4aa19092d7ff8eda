"""Saturation from the PaO2 on the patient's curve when no saturation was measured.

The reference P50 comes from integrating Severinghaus's Bohr coefficient numerically with
scipy (Severinghaus JW, J Appl Physiol 1979;46:599, eq. 4: d ln PO2 / d pH =
(PO2/26.6)^0.184 − 2.2, from P50 26.86 mmHg at pH 7.40), not from the code under test.
"""

from __future__ import annotations

import math
from datetime import date

import pytest
from scipy.integrate import solve_ivp

from service.assess.assess import windows
from service.assess.derive import GasFacts, derive_gas_facts
from service.assess.pairing import pair_gases
from service.config import Settings
from service.intake.model import Quantity as Q

from .builders import intake, m


def _p50(ph: float) -> float:
    solution = solve_ivp(
        lambda _x, y: [(math.exp(y[0]) / 26.6) ** 0.184 - 2.2],
        (7.40, ph),
        [math.log(26.86)],
        rtol=1e-10,
        atol=1e-12,
    )
    return math.exp(float(solution.y[0][-1]))


def _saturation(po2: float, p50: float) -> float:
    """Severinghaus 1979 eq. 1 at the PO2 scaled to the standard P50."""
    x = po2 * 26.86 / p50
    return 1.0 / (23400.0 / (x**3 + 150.0 * x) + 1.0)


def _gas(*extra: object) -> GasFacts:
    data = intake(
        m(Q.ARTERIAL_PO2, 58.0),
        m(Q.ARTERIAL_PCO2, 60.0),
        m(Q.FIO2, 0.28),
        m(Q.HAEMOGLOBIN, 13.0),
        m(Q.BAROMETRIC_PRESSURE, 760.0),
        *extra,  # type: ignore[arg-type]
    )
    settings = Settings()
    (gas,) = [
        derive_gas_facts(g, patient=data.patient, settings=settings, today=date(2026, 11, 20))
        for g in pair_gases(data, windows=windows(settings)).gases
    ]
    return gas


def test_an_acidaemic_patient_s_saturation_comes_from_the_right_shifted_curve() -> None:
    gas = _gas(m(Q.ARTERIAL_PH, 7.25))
    p50 = _p50(7.25)
    # First order: 26.86 × exp(−((26.86/26.6)^0.184 − 2.2) × 0.15) = 32.2 mmHg (a right shift).
    assert p50 == pytest.approx(26.86 * math.exp(1.198 * 0.15), abs=0.2)
    content = 1.34 * 13.0 * _saturation(58.0, p50) + 0.003 * 58.0
    assert gas.facts["arterial_o2_content"] == pytest.approx(content, abs=0.01)
    assert "patient's curve" in gas.derived["arterial-o2-content"].method


def test_the_end_capillary_blood_is_on_the_same_curve() -> None:
    gas = _gas(m(Q.ARTERIAL_PH, 7.25))
    p50 = _p50(7.25)
    alveolar = float(gas.derived["alveolar-po2"].value)
    ca = 1.34 * 13.0 * _saturation(58.0, p50) + 0.003 * 58.0
    cc = 1.34 * 13.0 * _saturation(alveolar, p50) + 0.003 * alveolar
    # Berggren's shunt equation with the assumed a-v difference of 5 mL/dL.
    expected = 100.0 * (cc - ca) / (cc - (ca - 5.0))
    assert gas.facts["venous_admixture"] == pytest.approx(expected, abs=0.05)


def test_without_a_ph_the_standard_curve_is_used_and_said() -> None:
    gas = _gas()
    content = 1.34 * 13.0 * _saturation(58.0, 26.86) + 0.003 * 58.0
    assert gas.facts["arterial_o2_content"] == pytest.approx(content, abs=0.01)
    assert "standard curve" in gas.derived["arterial-o2-content"].method


def test_a_measured_saturation_wins_over_any_curve() -> None:
    gas = _gas(m(Q.ARTERIAL_PH, 7.25), m(Q.ARTERIAL_SO2, 0.9))
    assert gas.facts["arterial_o2_content"] == pytest.approx(
        1.34 * 13.0 * 0.9 + 0.003 * 58.0, abs=0.01
    )
