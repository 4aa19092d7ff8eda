"""The forward model's inlined dissociation curve and its PaO2 solve by Halley's method.

References coded here afresh, independent of ``service``: Severinghaus JW, J Appl Physiol
1979;46:599, eq. 1, S = 1 / (23400 / (P³ + 150 P) + 1), on the standard-curve PO2 (the
blood's PO2 times the affinity scale); its slopes by central finite differences; the PaO2 by
scipy's Brent root finder; Halley's method converging cubically near a simple root (Traub JF,
Iterative Methods for the Solution of Equations, 1964, from memory).
"""

from __future__ import annotations

import random

import pytest
from scipy.optimize import brentq

from service.physiology import oxygen_exchange
from service.physiology.oxygen_exchange import exchange_state

SOLUBILITY = 0.003  # mL/dL per mmHg at 37 °C (common practice)


def _severinghaus(po2_mmhg: float) -> float:
    """Severinghaus 1979 eq. 1."""
    return 1.0 / (23400.0 / (po2_mmhg**3 + 150.0 * po2_mmhg) + 1.0)


def _saturation(po2_mmhg: float, scale: float) -> float:
    return _severinghaus(scale * po2_mmhg)


def _slope(po2_mmhg: float, scale: float) -> float:
    """dS/dPO2 by a central difference of eq. 1."""
    step = 1e-4 * max(po2_mmhg, 1.0)
    return (_saturation(po2_mmhg + step, scale) - _saturation(po2_mmhg - step, scale)) / (
        2.0 * step
    )


# (alveolar PO2, ΔPO2, shunt odds, k Hb, a-v difference, affinity scale): lungs whose
# end-capillary and arterial PO2 fall on the steep part, the shoulder and the flat part.
LUNGS = [
    (100.0, 0.0, 0.1, 18.76, 5.0, 1.0),
    (100.0, 55.0, 0.05, 18.76, 5.0, 1.0),
    (150.0, 20.0, 0.3, 12.0, 4.0, 0.8),
    (300.0, 40.0, 0.25, 22.0, 6.0, 1.3),
    (600.0, 10.0, 0.5, 18.76, 3.5, 1.1),
    (70.0, 30.0, 0.0, 9.0, 2.0, 0.7),
]


@pytest.mark.parametrize("lung", LUNGS)
def test_the_inlined_curve_and_its_slopes_are_severinghaus_eq_1(
    lung: tuple[float, float, float, float, float, float],
) -> None:
    alveolar, drop, odds, kh, avd, scale = lung
    state = exchange_state(alveolar, drop, odds, kh, avd, scale)
    assert state is not None
    capillary = alveolar - drop
    assert state.end_capillary_po2_mmhg == capillary
    s_cap = _saturation(capillary, scale)
    assert state.end_capillary_saturation == pytest.approx(s_cap, rel=1e-13)
    c_cap = kh * s_cap + SOLUBILITY * capillary
    assert state.end_capillary_content_ml_dl == pytest.approx(c_cap, rel=1e-13)
    # the shunt equation: CaO2 = Cc'O2 − avd × shunt / (1 − shunt)
    c_art = c_cap - odds * avd
    assert state.arterial_content_ml_dl == pytest.approx(c_art, rel=1e-13)
    pa = state.arterial_po2_mmhg
    assert state.arterial_saturation == pytest.approx(_saturation(pa, scale), rel=1e-13)
    assert kh * _saturation(pa, scale) + SOLUBILITY * pa == pytest.approx(c_art, rel=1e-11)
    assert state.saturation_slope == pytest.approx(_slope(pa, scale), rel=1e-6)
    assert state.content_slope_arterial == pytest.approx(
        kh * _slope(pa, scale) + SOLUBILITY, rel=1e-6
    )
    assert state.content_slope_capillary == pytest.approx(
        kh * _slope(capillary, scale) + SOLUBILITY, rel=1e-6
    )


def _root(content: float, kh: float, scale: float, upper: float) -> float:
    def excess(po2: float) -> float:
        return kh * _saturation(po2, scale) + SOLUBILITY * po2 - content

    return float(brentq(excess, 1e-9, upper, xtol=1e-13, rtol=1e-15))


@pytest.mark.parametrize(("halley_steps", "start_error"), [(1, 1e-4), (2, 3e-2)])
def test_halleys_solve_from_a_nearby_answer_converges_cubically(
    monkeypatch: pytest.MonkeyPatch, halley_steps: int, start_error: float
) -> None:
    # The solve's promise: from a start within a few percent of the root, one or two Halley
    # steps reach 1e-12 of the content. Cubic convergence takes a relative error of 1e-4 to
    # ~1e-12 in one step and 3e-2 to ~1e-14 in two; a second-order step (Newton's, or
    # Halley's with a wrong second derivative) needs one more. With the step budget held to
    # these counts (plus the check of the last iterate), the solve must settle on the root.
    monkeypatch.setattr(oxygen_exchange, "_NEAR_MAX_STEPS", halley_steps + 1)
    rng = random.Random(29)
    checked = 0
    while checked < 120:
        alveolar, drop = rng.uniform(40.0, 690.0), rng.uniform(0.0, 100.0)
        odds = rng.uniform(0.0, 1.0)
        kh, avd, scale = rng.uniform(7.0, 25.0), rng.uniform(2.0, 8.0), rng.uniform(0.6, 1.5)
        cold = exchange_state(alveolar, drop, odds, kh, avd, scale)
        if cold is None:
            continue
        content, upper = cold.arterial_content_ml_dl, cold.end_capillary_po2_mmhg
        root = _root(content, kh, scale, upper * (1.0 + 1e-12))
        if root >= upper * (1.0 - 1e-6):
            continue  # no shunt: the root is the bracket's end
        start = root * (1.0 + rng.choice((-1.0, 1.0)) * start_error)
        found = oxygen_exchange._po2_near(content, kh, SOLUBILITY, scale, upper, start)
        assert found == pytest.approx(root, rel=1e-9), (found, root)
        checked += 1
