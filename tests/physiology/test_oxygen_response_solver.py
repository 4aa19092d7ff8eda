"""The oxygen-response fit against scipy on the same χ², written independently
(``oxygen_fit_reference``): the estimate, the χ² at the minimum, the linearised standard errors,
the effective shunt's ± 1.96 SE range and the covariance handed to the prediction ranges."""

from __future__ import annotations

import math
import random
from functools import cache

import numpy as np
import pytest
from scipy.optimize import brentq

from service.physiology.oxygen_response import ModelFit, OxygenResponse, fit_oxygen_response
from service.physiology.titration import TitrationPoint
from tests import titration_reference as model
from tests.physiology import oxygen_fit_reference as ref
from tests.physiology.oxygen_points import START, generated_points, inspired

GAS_FIO2S = (0.25, 0.3, 0.4, 0.6, 0.8)
# Seeded noisy titrations (the fit's usual inputs): gases; oximetry on the steep part of the
# curve; oximetry and gases mixed. Seeds chosen so that one fit is worse than its stated
# errors (χ²/ν > 1, the ranges scaled up) and one better.
SCENARIOS: dict[str, tuple[float, float, tuple[float, ...], tuple[str, ...], int]] = {
    "gases": (0.12, 30.0, GAS_FIO2S, ("pao2",), 6),
    "gases-small-vq": (0.1, 10.0, GAS_FIO2S, ("pao2",), 0),
    "gases-large-vq": (0.16, 30.0, GAS_FIO2S, ("pao2",), 2),
    "gases-shunt": (0.19, 40.0, GAS_FIO2S, ("pao2",), 3),
    "oximetry": (0.15, 50.0, (0.21, 0.25, 0.3, 0.35, 0.4, 0.5), ("spo2",), 101),
    "mixed": (0.2, 40.0, (0.25, 0.3, 0.4, 0.6), ("spo2", "pao2"), 8),
}


@cache
def _points(name: str) -> tuple[TitrationPoint, ...]:
    shunt, drop, fio2s, kinds, seed = SCENARIOS[name]
    return tuple(
        generated_points(
            shunt=shunt,
            vq_drop_mmhg=drop,
            fio2s=fio2s,
            kinds=kinds,
            rng=random.Random(seed),
            spo2_noise=0.01,
            pao2_relative_noise=0.05,
        )
    )


@cache
def _fit(name: str) -> OxygenResponse:
    return fit_oxygen_response(points=_points(name))


def _used(name: str) -> list[ref.Obs]:
    return [o for o in ref.observations(_points(name)) if o.kind != "spo2" or o.value <= 0.97]


@cache
def _scipy(name: str, fit_drop: bool) -> ref.Minimum:
    shunt, drop, *_ = SCENARIOS[name]
    return ref.minimum(_used(name), (shunt / (1.0 - shunt), drop), fit_drop=fit_drop)


@cache
def _linearised(name: str, fit_drop: bool) -> np.ndarray:
    """(JᵀJ)⁻¹ at the reported estimate, scaled by max(1, χ²/ν)."""
    fit = _two(name) if fit_drop else _one(name)
    var = ref.covariance(_used(name), fit.shunt_odds, fit.vq_drop_mmhg.value, fit_drop=fit_drop)
    return var * _inflation(fit)


def _two(name: str) -> ModelFit:
    fit = _fit(name).two_parameter
    assert fit is not None, _fit(name).refusal
    return fit


def _one(name: str) -> ModelFit:
    fit = _fit(name).effective_shunt
    assert fit is not None
    return fit


def _inflation(fit: ModelFit) -> float:
    return max(1.0, fit.chi_square / fit.degrees_of_freedom)


def test_the_scenarios_cover_fits_better_and_worse_than_their_stated_errors() -> None:
    ratios = [_two(n).chi_square / _two(n).degrees_of_freedom for n in SCENARIOS]
    assert min(ratios) < 1.0 < max(ratios)


@pytest.mark.parametrize("name", SCENARIOS)
def test_the_two_parameter_fit_is_scipys_least_squares_minimum(name: str) -> None:
    # The module promises the estimate within 0.001 standard errors of the minimum (its
    # Gauss–Newton decrement below 1e-6); allow 0.003, and the χ² within 1e-6 of scipy's.
    fit, best = _two(name), _scipy(name, True)
    assert fit.converged
    assert fit.chi_square == pytest.approx(best.chi_square, abs=1e-6 * (1.0 + best.chi_square))
    se_odds, se_drop = np.sqrt(np.diag(best.covariance))
    assert abs(fit.shunt_odds - best.odds) <= 0.003 * se_odds
    assert abs(fit.vq_drop_mmhg.value - best.drop) <= 0.003 * se_drop


@pytest.mark.parametrize("name", SCENARIOS)
def test_the_effective_shunt_is_scipys_one_parameter_minimum(name: str) -> None:
    fit, best = _one(name), _scipy(name, False)
    assert fit.converged and fit.vq_drop_mmhg.fixed and fit.vq_drop_mmhg.value == 0.0
    assert fit.chi_square == pytest.approx(best.chi_square, abs=1e-6 * (1.0 + best.chi_square))
    se_odds = math.sqrt(best.covariance[0, 0])
    assert abs(fit.shunt_odds - best.odds) <= 0.003 * se_odds


@pytest.mark.parametrize("name", SCENARIOS)
def test_standard_errors_are_the_linearised_ones_scaled_by_the_fits_quality(name: str) -> None:
    # (JᵀJ)⁻¹ × max(1, χ²/ν); the shunt's SE carried from the odds by the delta method,
    # d shunt / d odds = 1 / (1 + odds)².
    for fit_drop in (True, False):
        fit, var = (_two(name) if fit_drop else _one(name)), _linearised(name, fit_drop)
        se_shunt = math.sqrt(var[0, 0]) / (1.0 + fit.shunt_odds) ** 2
        assert fit.shunt.standard_error == pytest.approx(se_shunt, rel=1e-4)
        if fit_drop:
            assert fit.vq_drop_mmhg.standard_error == pytest.approx(math.sqrt(var[1, 1]), rel=1e-4)
            corr = var[0, 1] / math.sqrt(var[0, 0] * var[1, 1])
            assert fit.correlation == pytest.approx(corr, abs=1e-4)


@pytest.mark.parametrize("name", SCENARIOS)
def test_the_effective_shunts_range_is_196_standard_errors_on_the_odds_scale(name: str) -> None:
    fit = _one(name)
    se_odds = math.sqrt(_linearised(name, False)[0, 0])
    low, high = fit.shunt_odds - ref.Z_95 * se_odds, fit.shunt_odds + ref.Z_95 * se_odds
    assert low > 0.0  # the lower end is not clipped at 0 in these scenarios
    assert fit.shunt.low == pytest.approx(low / (1.0 + low), abs=1e-6)
    assert fit.shunt.high == pytest.approx(high / (1.0 + high), abs=1e-6)
    assert fit.covariance[0] == pytest.approx(se_odds**2, rel=1e-4)
    assert not fit.shunt.profile


def test_an_effective_shunt_near_zero_keeps_its_range_inside_zero_to_095() -> None:
    # A small shunt's lower end clips at 0, a large one's upper end stays below 0.95.
    small = generated_points(shunt=0.005, vq_drop_mmhg=0.0, fio2s=(0.3,), rng=random.Random(1))
    fit = fit_oxygen_response(points=small).effective_shunt
    assert fit is not None and fit.shunt.low == 0.0 < fit.shunt.value < fit.shunt.high < 0.05


@pytest.mark.parametrize("name", SCENARIOS)
def test_the_prediction_covariance_is_widened_to_the_profile_ranges(name: str) -> None:
    # The covariance handed on for prediction ranges: each variance raised, where the 95 %
    # profile range is wider than ± 1.96 linearised SEs, to (range width / 3.92)², keeping the
    # linearised correlation.
    fit, var = _two(name), _linearised(name, True)
    odds_low = fit.shunt.low / (1.0 - fit.shunt.low)
    odds_high = fit.shunt.high / (1.0 - fit.shunt.high)
    var_odds = max(var[0, 0], ((odds_high - odds_low) / (2.0 * ref.Z_95)) ** 2)
    var_drop = max(var[1, 1], (fit.vq_drop_mmhg.width / (2.0 * ref.Z_95)) ** 2)
    corr = var[0, 1] / math.sqrt(var[0, 0] * var[1, 1])
    assert fit.covariance[0] == pytest.approx(var_odds, rel=1e-4)
    assert fit.covariance[2] == pytest.approx(var_drop, rel=1e-4)
    assert fit.covariance[1] == pytest.approx(corr * math.sqrt(var_odds * var_drop), rel=1e-4)


def test_the_scenarios_widen_some_variances_and_not_others() -> None:
    # So that the test above sees both branches of "where the profile range is wider".
    widened = kept = 0
    for name in SCENARIOS:
        fit, var = _two(name), _linearised(name, True)
        for got, linear in ((fit.covariance[0], var[0, 0]), (fit.covariance[2], var[1, 1])):
            widened += got > linear * 1.01
            kept += got == pytest.approx(linear, rel=1e-4)
    assert widened and kept


@pytest.mark.parametrize("name", SCENARIOS)
def test_standardised_residuals_add_up_to_the_chi_square(name: str) -> None:
    for fit in (_two(name), _one(name)):
        used = [p for p in fit.points if p.used]
        assert sum(p.standardised_residual**2 for p in used) == pytest.approx(
            fit.chi_square, rel=1e-9
        )
        for p in used:
            assert p.standardised_residual == pytest.approx(p.residual / p.expected_error)


def test_points_beyond_the_models_reach_are_fitted_at_the_steady_state_limit() -> None:
    # A wide a-v difference (10 mL/dL, measured) and an SaO2 of 0.50 on FiO2 0.21: no shunt
    # leaves a mixed venous content above zero and gives so little oxygen. The least-squares
    # start lies on that limit, where the model has no steady state; the solver steps back
    # in and ends at the limit: shunt odds (Cc'O2 − avd) / avd, CaO2 = Cc'O2 − odds × avd
    # (Berggren 1942) with a mixed venous content of zero.
    from service.physiology.oxygen_exchange import exchange_conditions

    point = TitrationPoint(START, inspired(0.21), sao2=0.50, paco2_mmhg=40.0)
    conditions = exchange_conditions(av_difference_ml_dl=10.0)
    fit = fit_oxygen_response(points=[point], conditions=conditions).effective_shunt
    assert fit is not None and fit.converged
    alveolar = model.alveolar(0.21, 40.0, ref.PB, ref.PH2O)
    odds_limit = (model.content(alveolar, ref.HB, model.p50_eq1()) - 10.0) / 10.0
    assert fit.shunt_odds == pytest.approx(odds_limit, abs=1e-4)
    assert fit.shunt_odds < odds_limit


def test_a_fit_out_of_iterations_is_refused_as_not_converged(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # An iteration budget of one: the solver stops short, says so, and the two-parameter fit
    # is refused rather than reported from wherever it stopped.
    import service.physiology.oxygen_response as fitting
    from service.physiology.oxygen_response import Refusal

    monkeypatch.setattr(fitting, "_MAX_ITERATIONS", 1)
    response = fit_oxygen_response(points=_points("gases"))
    assert response.two_parameter is None
    assert response.refusal_reason is Refusal.NOT_CONVERGED
    assert response.effective_shunt is not None and not response.effective_shunt.converged


def test_one_oximetry_point_gives_the_shunt_equations_effective_shunt() -> None:
    # One SpO2 of 0.90 on FiO2 0.30: the effective shunt solves CaO2 = Cc'O2 − odds × avd
    # exactly (Berggren 1942), CaO2 from the saturation and its PO2 on the eq. 1 curve.
    point = TitrationPoint(START, inspired(0.3), spo2=0.90)
    fit = fit_oxygen_response(points=[point]).effective_shunt
    assert fit is not None and fit.converged and fit.chi_square < 1e-12
    alveolar = model.alveolar(0.3, ref.ASSUMED_PACO2, ref.PB, ref.PH2O)
    po2 = brentq(lambda p: model.saturation_eq1(p) - 0.90, 1.0, 200.0, xtol=1e-12)
    arterial = ref.KH * 0.90 + model.ALPHA * po2
    odds = (model.content(alveolar, ref.HB, model.p50_eq1()) - arterial) / ref.AVD
    assert fit.shunt_odds == pytest.approx(odds, rel=1e-6)
    # No spare degree of freedom: the linearised SE is not scaled by χ²/ν.
    var = ref.covariance(ref.observations([point]), fit.shunt_odds, 0.0, fit_drop=False)
    se_shunt = math.sqrt(var[0, 0]) / (1.0 + fit.shunt_odds) ** 2
    assert fit.degrees_of_freedom == 0 and fit.fit_probability is None
    assert fit.shunt.standard_error == pytest.approx(se_shunt, rel=1e-4)


@pytest.mark.parametrize(
    ("fio2s", "shunt", "drop"),
    [
        # Gases on high FiO2 only: the end-capillary blood is saturated whatever ΔPO2 is, so
        # the two parameters' effects on PaO2 coincide (Sapsford & Jones 1995).
        ((0.8, 0.9, 1.0), 0.1, 0.0),
        ((0.6, 1.0), 0.3, 10.0),
        ((0.5, 0.7, 1.0), 0.3, 10.0),
        # From FiO2 0.5 a lung without shunt is only just separable (and then refused for the
        # width of its ΔPO2 range).
        ((0.5, 0.7, 1.0), 0.1, 0.0),
        ((0.5, 0.7, 1.0), 0.05, 5.0),
        # Either side of the limit, within 10 to 15 %: reciprocal condition numbers of
        # 0.91e-10 (refused) and 1.13e-10 (not refused as inseparable).
        ((0.5, 0.7, 1.0), 0.15, 0.0),
        ((0.5, 0.7, 1.0), 0.15, 10.0),
    ],
)
def test_points_that_cannot_separate_the_parameters_are_refused(
    fio2s: tuple[float, ...], shunt: float, drop: float
) -> None:
    # Not separable: the reciprocal condition number of JᵀJ (numpy's, from the eigenvalues)
    # below 1e-10 at the estimate.
    import service.physiology.oxygen_response as fitting
    from service.physiology.oxygen_exchange import STANDARD_CONDITIONS
    from service.physiology.oxygen_response import Refusal

    points = generated_points(shunt=shunt, vq_drop_mmhg=drop, fio2s=fio2s)
    response = fit_oxygen_response(points=points)
    used = [fitting._observation(p, STANDARD_CONDITIONS, 0.02, 0.01) for p in points]
    solution = fitting._solve(used, STANDARD_CONDITIONS, fit_drop=True)
    assert solution.evaluation is not None
    jac = np.column_stack([solution.evaluation.d_odds, solution.evaluation.d_drop])
    eigenvalues = np.linalg.eigvalsh(jac.T @ jac)
    singular = eigenvalues[0] / eigenvalues[1] < 1e-10
    assert (response.refusal_reason is Refusal.NOT_SEPARABLE) == singular


@pytest.mark.parametrize("seed", [0, 1, 4])
def test_a_parameter_at_its_limit_is_still_scipys_bounded_minimum(seed: int) -> None:
    # A lung without shunt, oximetry and gases mixed: the least-squares shunt (seeds 0, 4)
    # or ΔPO2 (seed 1) sits at its lower limit, 0, and the solver holds it there while it
    # fits the other (an active set); scipy's bounded trust-region method agrees.
    points = generated_points(
        shunt=0.0,
        vq_drop_mmhg=35.0,
        fio2s=(0.24, 0.33, 0.36, 0.48, 0.6),
        kinds=("spo2", "pao2"),
        rng=random.Random(seed),
        spo2_noise=0.01,
        pao2_relative_noise=0.05,
    )
    fit = fit_oxygen_response(points=points).two_parameter
    assert fit is not None and fit.converged
    used = [o for o in ref.observations(points) if o.kind != "spo2" or o.value <= 0.97]
    best = ref.minimum(used, (0.01, 35.0))
    assert min(best.odds, best.drop) < 1e-9  # one parameter at its limit
    assert fit.chi_square == pytest.approx(best.chi_square, abs=1e-6 * (1.0 + best.chi_square))
    se_odds, se_drop = np.sqrt(np.diag(best.covariance))
    assert abs(fit.shunt_odds - best.odds) <= 0.003 * se_odds
    assert abs(fit.vq_drop_mmhg.value - best.drop) <= 0.003 * se_drop


@pytest.mark.parametrize("name", SCENARIOS)
def test_fit_probabilities_are_chi_square_tail_probabilities(name: str) -> None:
    # ν = points − parameters: n − 2 for shunt and ΔPO2, n − 1 for the effective shunt;
    # the probability is the χ²(ν) upper tail (scipy.special.chdtrc).
    from scipy.special import chdtrc

    n = len(_used(name))
    for fit, parameters in ((_two(name), 2), (_one(name), 1)):
        assert fit.degrees_of_freedom == n - parameters
        assert fit.fit_probability == pytest.approx(
            chdtrc(n - parameters, fit.chi_square), rel=1e-6
        )
