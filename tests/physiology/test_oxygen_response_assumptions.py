"""The oxygen-response fit's sensitivity to its assumed values, and the edges of its
identifiability rules.

Sensitivity: on points the model makes exactly (zero residuals), the least-squares estimate
moves with an assumption at the rate −(JᵀJ)⁻¹ Jᵀ ∂r/∂assumption (the implicit function theorem:
the second-order terms carry the residuals, here zero), so the linearised sensitivity must
match the derivative of real refits, taken here by central differences.
"""

from __future__ import annotations

from dataclasses import replace
from functools import cache

import pytest

from service.physiology.oxygen_exchange import ExchangeConditions, exchange_conditions
from service.physiology.oxygen_response import (
    IdentifiabilityLimits,
    ModelFit,
    Refusal,
    Sensitivity,
    fit_oxygen_response,
)
from service.physiology.titration import TitrationPoint
from tests.physiology.oxygen_points import generated_points

# Gases without their PaCO2 (the assumed 40 mmHg is used and varied) and oximetry, from a
# lung with shunt 0.15 and ΔPO2 40 mmHg; Hb assumed (14 g/dL).
POINTS = tuple(
    replace(p, paco2_mmhg=None) if p.pao2_mmhg is not None else p
    for p in generated_points(
        shunt=0.15, vq_drop_mmhg=40.0, fio2s=(0.21, 0.25, 0.3, 0.4, 0.6), kinds=("spo2", "pao2")
    )
)
STEPS = {"haemoglobin_g_dl": 0.02, "paco2_mmhg": 0.05}


def _conditions(name: str, value: float) -> ExchangeConditions:
    if name == "haemoglobin_g_dl":
        return exchange_conditions(haemoglobin_g_dl=value)
    return exchange_conditions(assumed_paco2_mmhg=value)


@cache
def _fit(points: tuple[TitrationPoint, ...], name: str = "", value: float = 0.0) -> ModelFit:
    if name:
        response = fit_oxygen_response(points=points, conditions=_conditions(name, value))
    else:
        response = fit_oxygen_response(points=points)
    assert response.two_parameter is not None, response.refusal
    return response.two_parameter


def _odds(shunt: float) -> float:
    return shunt / (1.0 - shunt)


def _sensitivity(fit: ModelFit, name: str) -> Sensitivity:
    (found,) = [s for s in fit.sensitivities if s.assumption == name]
    return found


@pytest.mark.parametrize("name", STEPS)
def test_the_linearised_sensitivity_is_the_derivative_of_the_refit(name: str) -> None:
    fit = _fit(POINTS)
    assert fit.chi_square < 1e-8  # the model's own points
    sensitivity = _sensitivity(fit, name)
    assert sensitivity.method == "linearised at the fit"
    value, h = sensitivity.assumed_value, STEPS[name]
    up, down = _fit(POINTS, name, value + h), _fit(POINTS, name, value - h)
    d_odds = (up.shunt_odds - down.shunt_odds) / (2.0 * h)
    d_drop = (up.vq_drop_mmhg.value - down.vq_drop_mmhg.value) / (2.0 * h)
    assert abs(d_odds) > 1e-5 and abs(d_drop) > 0.1  # both parameters do move
    for moved, shunt, drop in (
        (sensitivity.low_value, sensitivity.shunt_at_low, sensitivity.vq_drop_at_low_mmhg),
        (sensitivity.high_value, sensitivity.shunt_at_high, sensitivity.vq_drop_at_high_mmhg),
    ):
        delta = moved - value
        assert _odds(shunt) == pytest.approx(fit.shunt_odds + d_odds * delta, rel=1e-3)
        assert drop == pytest.approx(fit.vq_drop_mmhg.value + d_drop * delta, rel=1e-3)


def test_the_assumed_values_are_moved_across_their_plausible_ranges() -> None:
    # Hb 8–17 g/dL and the assumed PaCO2 ± 10 mmHg (the module's stated ranges).
    fit = _fit(POINTS)
    hb, paco2 = _sensitivity(fit, "haemoglobin_g_dl"), _sensitivity(fit, "paco2_mmhg")
    assert (hb.assumed_value, hb.low_value, hb.high_value) == (14.0, 8.0, 17.0)
    assert (paco2.assumed_value, paco2.low_value, paco2.high_value) == (40.0, 30.0, 50.0)


# --- identifiability edges --------------------------------------------------------------------

SPAN_POINTS = tuple(generated_points(shunt=0.15, vq_drop_mmhg=30.0, fio2s=(0.25, 0.3, 0.4, 0.5)))


def test_points_spanning_exactly_the_least_fio2_span_are_fitted() -> None:
    # "do not span at least" the limit: a span equal to it (0.50 − 0.25, exact in binary)
    # passes; a wider limit refuses, naming the FiO2s the points lie between.
    assert (
        fit_oxygen_response(
            points=SPAN_POINTS, limits=IdentifiabilityLimits(min_fio2_span=0.25)
        ).two_parameter
        is not None
    )
    refused = fit_oxygen_response(
        points=SPAN_POINTS, limits=IdentifiabilityLimits(min_fio2_span=0.3)
    )
    assert refused.refusal_reason is Refusal.NARROW_SPAN
    assert refused.refusal is not None and "(0.25–0.50)" in refused.refusal


def test_a_range_exactly_as_wide_as_its_limit_is_accepted() -> None:
    # "wider than" the limit is refused; as wide as it is not.
    fit = _fit(SPAN_POINTS)
    shunt_width, vq_width = fit.shunt.width, fit.vq_drop_mmhg.width
    assert shunt_width >= 0.01 and vq_width >= 1.0
    exact = IdentifiabilityLimits(
        max_shunt_range_width=shunt_width, max_vq_drop_range_width_mmhg=vq_width
    )
    assert fit_oxygen_response(points=SPAN_POINTS, limits=exact).two_parameter is not None
    for limits, reason in (
        (replace(exact, max_shunt_range_width=shunt_width * 0.999), Refusal.SHUNT_RANGE_WIDE),
        (replace(exact, max_vq_drop_range_width_mmhg=vq_width * 0.999), Refusal.VQ_RANGE_WIDE),
    ):
        assert fit_oxygen_response(points=SPAN_POINTS, limits=limits).refusal_reason is reason
