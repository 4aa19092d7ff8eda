"""The numerics under the oxygen-response fit: the PaO2 solve from a nearby answer, the
gradient and Hessian the solver steps by, and what the solver must always reach."""

from __future__ import annotations

import math
import random

import pytest
from scipy.optimize import brentq

from service.physiology import oxygen_response as fitting
from service.physiology.oxygen_exchange import STANDARD_CONDITIONS, exchange_state
from service.physiology.oxygen_response import fit_oxygen_response
from service.physiology.saturation import saturation_from_po2
from tests.physiology.oxygen_points import generated_points, half_chi_square, used_observations

SOLUBILITY = 0.003  # mL/dL per mmHg at 37 °C (common practice)


def _brent_pao2(content: float, kh: float, scale: float, upper: float) -> float:
    """PaO2 from its content by scipy's Brent root finder on the checked, public Severinghaus
    1979 eq. 1 (``saturation_from_po2``) at the standard-curve PO2 scale × PO2: a reference
    independent of the model's own solves."""

    def excess(po2: float) -> float:
        return kh * saturation_from_po2(po2_mmhg=scale * po2) + SOLUBILITY * po2 - content

    return float(brentq(excess, 1e-9, upper, xtol=1e-12, rtol=1e-14))


def test_the_pao2_solve_from_a_nearby_answer_matches_an_independent_root_finder() -> None:
    # 3,000 random lungs, each solved cold and from starts near and far from the answer: every
    # PaO2 within 1e-8 relative of scipy's brentq on Severinghaus eq. 1, whatever the start.
    rng = random.Random(7)
    checked = 0
    while checked < 3000:
        alveolar, drop = rng.uniform(20.0, 690.0), rng.choice([0.0, rng.uniform(0.0, 300.0)])
        odds = rng.choice([0.0, rng.uniform(0.0, 0.4), rng.uniform(0.0, 19.0)])
        kh, avd, scale = rng.uniform(7.0, 25.0), rng.uniform(1.0, 8.0), rng.uniform(0.6, 1.5)
        cold = exchange_state(alveolar, drop, odds, kh, avd, scale)
        if cold is None:
            continue
        reference = _brent_pao2(
            cold.arterial_content_ml_dl, kh, scale, cold.end_capillary_po2_mmhg * (1 + 1e-12)
        )
        for start in (
            0.0,
            cold.arterial_po2_mmhg * math.exp(rng.gauss(0.0, 0.05)),
            cold.arterial_po2_mmhg * math.exp(rng.gauss(0.0, 0.8)),
            rng.uniform(0.1, 900.0),
        ):
            state = exchange_state(alveolar, drop, odds, kh, avd, scale, start)
            assert state is not None
            assert state.arterial_po2_mmhg == pytest.approx(reference, rel=1e-8, abs=1e-9)
            assert state.arterial_saturation == pytest.approx(
                saturation_from_po2(po2_mmhg=scale * state.arterial_po2_mmhg), rel=1e-12
            )
        checked += 1


@pytest.mark.parametrize("half_range", [0.0, 0.05])
def test_the_solvers_gradient_and_hessian_are_those_of_the_chi_square(half_range: float) -> None:
    # Central finite differences of ½χ² (the objective the solver accepts steps by) as the
    # reference: the analytic gradient must match them also when the FiO2 is a device
    # estimate (± 0.05), where each point's expected error moves with the parameters; the
    # full Hessian (JᵀJ plus the second-order term) where the FiO2 is measured.
    rng = random.Random(3)
    for _ in range(25):
        points = generated_points(
            shunt=rng.uniform(0.02, 0.3),
            vq_drop_mmhg=rng.uniform(0.0, 60.0),
            fio2s=(0.25, 0.32, 0.45, 0.6),
            kinds=rng.choice([("pao2",), ("spo2",), ("spo2", "pao2")]),
            rng=rng,
            spo2_noise=0.03,
            pao2_relative_noise=0.1,
            fio2_half_range=half_range,
        )
        used = used_observations(points)
        odds, drop = rng.uniform(0.05, 0.4), rng.uniform(5.0, 30.0)
        evaluation = fitting._evaluate(used, odds, drop, STANDARD_CONDITIONS)
        assert evaluation is not None
        g, h, second = fitting._local_model(used, evaluation, STANDARD_CONDITIONS, True)
        step_o, step_d = 1e-6, 1e-4
        g_odds = (
            half_chi_square(used, odds + step_o, drop) - half_chi_square(used, odds - step_o, drop)
        ) / (2 * step_o)
        g_drop = (
            half_chi_square(used, odds, drop + step_d) - half_chi_square(used, odds, drop - step_d)
        ) / (2 * step_d)
        assert g[0] == pytest.approx(g_odds, rel=1e-5, abs=1e-4)
        assert g[1] == pytest.approx(g_drop, rel=1e-5, abs=1e-6)
        if half_range:
            continue
        step_o, step_d = 1e-4, 1e-2
        centre = half_chi_square(used, odds, drop)
        h_oo = (
            half_chi_square(used, odds + step_o, drop)
            - 2 * centre
            + half_chi_square(used, odds - step_o, drop)
        ) / step_o**2
        h_dd = (
            half_chi_square(used, odds, drop + step_d)
            - 2 * centre
            + half_chi_square(used, odds, drop - step_d)
        ) / step_d**2
        assert h[0] + second[0] == pytest.approx(h_oo, rel=1e-3)
        assert h[2] + second[2] == pytest.approx(h_dd, rel=1e-3)


def test_fits_on_device_estimated_fio2_converge_and_never_fit_worse_than_one_parameter() -> None:
    # 150 random noisy titrations on device-estimated FiO2 (± 0.03–0.05), some poorly fitting:
    # both searches converge, and the two-parameter χ² is never above the effective shunt's
    # (that model is the two-parameter one at ΔPO2 = 0, so a minimum above it is not the
    # least-squares fit). Fitted with the χ²'s own gradient, none stalls: with the gradient
    # that holds each point's expected error fixed, 6 % of such fits were refused as
    # not converged.
    rng = random.Random(20261205)
    checked = 0
    while checked < 150:
        first = rng.uniform(0.21, 0.4)
        fio2s = sorted({round(min(1.0, first + i * rng.uniform(0.03, 0.15)), 2) for i in range(5)})
        try:
            points = generated_points(
                shunt=rng.uniform(0.0, 0.4),
                vq_drop_mmhg=rng.uniform(0.0, 100.0),
                fio2s=fio2s,
                kinds=rng.choice([("pao2",), ("spo2",), ("spo2", "pao2")]),
                rng=rng,
                spo2_noise=rng.choice([0.01, 0.02, 0.05]),
                pao2_relative_noise=rng.choice([0.04, 0.1, 0.2]),
                fio2_half_range=rng.choice([0.03, 0.05]),
            )
        except ValueError:
            continue  # no steady state on the lowest FiO2
        used = used_observations(points)
        if len({o.point.inspired.fio2 for o in used}) < 2:
            continue
        one = fitting._solve(used, STANDARD_CONDITIONS, fit_drop=False)
        two = fitting._solve(used, STANDARD_CONDITIONS, fit_drop=True, effective=one)
        assert one.converged and two.converged
        assert two.chi_square <= one.chi_square * (1 + 1e-9)
        response = fit_oxygen_response(points=points)
        assert response.refusal_reason is not fitting.Refusal.NOT_CONVERGED
        checked += 1
