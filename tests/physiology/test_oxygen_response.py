"""Fitting shunt and the V/Q term to titration points, and refusing when they cannot tell."""

from __future__ import annotations

import math
import random
from dataclasses import replace

import numpy as np
import pytest
from scipy.optimize import least_squares

from service.exceptions import ImpossibleValueError
from service.physiology.gas_exchange import alveolar_po2_mmhg
from service.physiology.oxygen_content import (
    end_capillary_content_ml_dl,
    oxygen_content_ml_dl,
    shunt_fraction,
)
from service.physiology.oxygen_exchange import (
    STANDARD_CONDITIONS,
    ExchangeConditions,
    exchange_conditions,
    predict_arterial_oxygen,
)
from service.physiology.oxygen_response import (
    MAX_SHUNT_RANGE_WIDTH,
    MAX_VQ_DROP_RANGE_WIDTH_MMHG,
    FitModel,
    OxygenResponse,
    fit_oxygen_response,
)
from service.physiology.saturation import saturation_from_po2
from service.physiology.titration import TitrationPoint
from tests.physiology.oxygen_points import START, generated_points, inspired

# Recovery bounds: about half the 95 % limits of agreement between two published ways of
# fitting the same SpO2 titrations (Rowe L et al., Arch Dis Child Fetal Neonatal Ed
# 2010;95:F47: shunt −6.5 to +3.5 %, right shift −2.9 to +3.6 kPa), i.e. ±5 points of shunt
# and ±3 kPa (22.5 mmHg) of ΔPO2.
SHUNT_BOUND = 0.05
VQ_BOUND_MMHG = 22.5

TRUTHS = [(0.02, 0.0), (0.10, 30.0), (0.25, 15.0), (0.15, 60.0), (0.05, 45.0), (0.30, 0.0)]
# A titration of gases that starts low enough for the V/Q term to show: above FiO2 0.4 the
# end-capillary blood is saturated whatever ΔPO2 is, and only the shunt is seen.
GAS_FIO2S = (0.25, 0.3, 0.4, 0.6, 0.8)


def _two(response: OxygenResponse) -> tuple[float, float]:
    fit = response.two_parameter
    assert fit is not None, response.refusal
    return fit.shunt.value, fit.vq_drop_mmhg.value


@pytest.mark.parametrize(("shunt", "drop"), TRUTHS)
def test_exact_gases_give_back_the_parameters(shunt: float, drop: float) -> None:
    points = generated_points(shunt=shunt, vq_drop_mmhg=drop, fio2s=GAS_FIO2S)
    response = fit_oxygen_response(points=points)
    fitted_shunt, fitted_drop = _two(response)
    assert fitted_shunt == pytest.approx(shunt, abs=1e-4)
    assert fitted_drop == pytest.approx(drop, abs=0.05)
    fit = response.two_parameter
    assert fit is not None and fit.converged and fit.chi_square < 1e-6
    assert fit.shunt.low <= shunt <= fit.shunt.high
    assert fit.vq_drop_mmhg.low <= drop <= fit.vq_drop_mmhg.high


@pytest.mark.parametrize(
    ("shunt", "drop", "fio2s"),
    # FiO2s chosen so that the saturations lie on the steep part of the curve (≤ 97 %).
    [(0.15, 50.0, (0.21, 0.25, 0.30, 0.35)), (0.25, 20.0, (0.21, 0.3, 0.4, 0.6))],
)
def test_exact_oximetry_alone_and_mixed_with_gases_give_back_the_parameters(
    shunt: float, drop: float, fio2s: tuple[float, ...]
) -> None:
    for kinds in (("spo2",), ("spo2", "pao2"), ("sao2",)):
        points = generated_points(shunt=shunt, vq_drop_mmhg=drop, fio2s=fio2s, kinds=kinds)
        fitted_shunt, fitted_drop = _two(fit_oxygen_response(points=points))
        assert fitted_shunt == pytest.approx(shunt, abs=1e-4)
        assert fitted_drop == pytest.approx(drop, abs=0.05)


@pytest.mark.parametrize(
    ("shunt", "drop", "fio2s", "kinds", "noise"),
    [
        # Gases with 5 % PaO2 scatter; oximetry steps with 1 % scatter (a step's median).
        (0.10, 30.0, GAS_FIO2S, ("pao2",), {"pao2_relative_noise": 0.05}),
        (0.05, 60.0, GAS_FIO2S, ("pao2",), {"pao2_relative_noise": 0.05}),
        (0.15, 50.0, (0.21, 0.25, 0.3, 0.35, 0.4, 0.5), ("spo2",), {"spo2_noise": 0.01}),
        (0.25, 20.0, (0.21, 0.3, 0.4, 0.5, 0.6, 0.7), ("spo2",), {"spo2_noise": 0.01}),
        (
            0.20,
            40.0,
            (0.25, 0.3, 0.4, 0.6),
            ("spo2", "pao2"),
            {"pao2_relative_noise": 0.05, "spo2_noise": 0.02},
        ),
    ],
)
def test_noisy_titrations_give_back_the_parameters_within_the_stated_bounds(
    shunt: float,
    drop: float,
    fio2s: tuple[float, ...],
    kinds: tuple[str, ...],
    noise: dict[str, float],
) -> None:
    # 60 seeded noisy titrations from known parameters. At least 90 % are identified, at
    # least 70 % land within the Rowe 2010 bounds above, and the stated 95 % ranges hold the
    # true pair (both at once) in at least 85 % — about what two 95 % ranges promise.
    trials = 60
    identified = within = covered = 0
    for seed in range(trials):
        points = generated_points(
            shunt=shunt,
            vq_drop_mmhg=drop,
            fio2s=fio2s,
            kinds=kinds,
            rng=random.Random(seed),
            spo2_noise=noise.get("spo2_noise", 0.0),
            pao2_relative_noise=noise.get("pao2_relative_noise", 0.0),
        )
        fit = fit_oxygen_response(points=points).two_parameter
        if fit is None:
            continue
        identified += 1
        s, d = fit.shunt, fit.vq_drop_mmhg
        within += abs(s.value - shunt) <= SHUNT_BOUND and abs(d.value - drop) <= VQ_BOUND_MMHG
        covered += s.low <= shunt <= s.high and d.low <= drop <= d.high
    assert identified >= 0.9 * trials
    assert within >= 0.7 * identified
    assert covered >= 0.85 * identified


def _scipy_minimum(points: list[TitrationPoint]) -> float:
    """The least χ² scipy.optimize.least_squares finds from nine starts, on the same
    residuals (the model's own, standardised), over the same limits."""
    import service.physiology.oxygen_response as fitting

    used = [
        fitting._observation(p, STANDARD_CONDITIONS, 0.02, 0.01)
        for p in points
        if p.spo2 is None or p.spo2 <= 0.97
    ]
    max_drop = fitting._max_drop(used, STANDARD_CONDITIONS)

    def residuals(x: np.ndarray) -> np.ndarray:
        evaluation = fitting._evaluate(used, float(x[0]), float(x[1]), STANDARD_CONDITIONS)
        return np.array(evaluation.residuals) if evaluation else np.full(len(used), 1e3)

    best = math.inf
    for odds in (0.01, 0.2, 0.6):
        for drop in (0.0, 30.0, 80.0):
            result = least_squares(
                residuals,
                [odds, min(drop, max_drop)],
                bounds=([0.0, 0.0], [19.0, max_drop + 1e-9]),
                xtol=1e-12,
                ftol=1e-12,
                gtol=1e-12,
            )
            best = min(best, 2.0 * float(result.cost))
    return best


def test_the_solver_reaches_the_minimum_scipy_finds() -> None:
    # scipy.optimize.least_squares (trust-region reflective, nine starts) as the reference
    # minimiser on 40 random noisy titrations of 2 to 5 points.
    rng = random.Random(11)
    checked = 0
    while checked < 40:
        shunt, drop = rng.uniform(0.0, 0.35), rng.uniform(0.0, 90.0)
        first = rng.uniform(0.25, 0.4)
        fio2s = [round(min(1.0, first + i * rng.uniform(0.05, 0.15)), 2) for i in range(4)]
        fio2s = sorted(set(fio2s))[: rng.choice((2, 3, 5))]
        kinds = rng.choice([("pao2",), ("spo2",), ("spo2", "pao2")])
        try:
            points = generated_points(
                shunt=shunt,
                vq_drop_mmhg=drop,
                fio2s=fio2s,
                kinds=kinds,
                rng=rng,
                spo2_noise=0.01,
                pao2_relative_noise=0.04,
            )
        except ValueError:
            continue  # no steady state on the lowest FiO2: not a titration anyone could see
        informative = [p for p in points if p.spo2 is None or p.spo2 <= 0.97]
        if len({p.inspired.fio2 for p in informative}) < 2:
            continue
        ours = fit_oxygen_response(points=points)
        import service.physiology.oxygen_response as fitting

        used = [fitting._observation(p, STANDARD_CONDITIONS, 0.02, 0.01) for p in informative]
        chi2 = fitting._solve(used, STANDARD_CONDITIONS, fit_drop=True).chi_square
        assert chi2 <= _scipy_minimum(points) + 1e-6 * (1.0 + chi2)
        assert ours.points_used == len(informative)
        checked += 1


def test_one_gas_gives_the_classic_shunt_equation_as_the_effective_shunt() -> None:
    # One PaO2 on FiO2 0.5: the one-parameter model must return exactly the venous admixture
    # of the Berggren shunt equation with the same assumptions (Hb 14, avd 5, ScO2 from the
    # curve at PAO2), computed by oxygen_content.
    point = TitrationPoint(START, inspired(0.5), pao2_mmhg=95.0, paco2_mmhg=38.0, ph=7.40)
    response = fit_oxygen_response(points=[point])
    assert response.two_parameter is None and response.refusal is not None
    assert "one informative point" in response.refusal
    effective = response.effective_shunt
    assert effective is not None and effective.model is FitModel.EFFECTIVE_SHUNT
    assert "not separated" in effective.label
    alveolar = alveolar_po2_mmhg(fio2=0.5, paco2_mmhg=38.0)
    classic = shunt_fraction(
        end_capillary_content_ml_dl=end_capillary_content_ml_dl(
            haemoglobin_g_dl=14.0, alveolar_po2_mmhg=alveolar, arterial_po2_mmhg=95.0
        ),
        arterial_content_ml_dl=oxygen_content_ml_dl(
            haemoglobin_g_dl=14.0, saturation=saturation_from_po2(po2_mmhg=95.0), po2_mmhg=95.0
        ),
        av_difference_ml_dl=5.0,
    )
    assert effective.shunt.value == pytest.approx(classic, abs=1e-7)
    assert effective.vq_drop_mmhg.fixed and effective.vq_drop_mmhg.value == 0.0


def test_two_points_on_nearly_the_same_fio2_are_refused() -> None:
    points = [
        TitrationPoint(START, inspired(0.40), pao2_mmhg=70.0, paco2_mmhg=40.0),
        TitrationPoint(START.replace(minute=20), inspired(0.42), pao2_mmhg=74.0, paco2_mmhg=40.0),
    ]
    response = fit_oxygen_response(points=points)
    assert response.two_parameter is None and response.vq_term_p_value is None
    assert response.refusal is not None and "within 0.03 of one FiO2" in response.refusal
    assert response.preferred is response.effective_shunt is not None


def test_oximetry_above_97_percent_is_left_out_and_all_of_it_is_refused() -> None:
    points = generated_points(shunt=0.03, vq_drop_mmhg=0.0, fio2s=(0.21, 0.3, 0.4), kinds=("spo2",))
    assert all(p.spo2 is not None and p.spo2 > 0.97 for p in points)
    response = fit_oxygen_response(points=points)
    assert response.preferred is None and response.points_used == 0
    assert response.refusal is not None and "above 97%" in response.refusal
    assert len(response.excluded) == 3 and "flat part" in response.excluded[0].reason


def test_flat_oximetry_is_reported_against_the_fitted_curve_but_not_fitted() -> None:
    points = generated_points(
        shunt=0.15, vq_drop_mmhg=50.0, fio2s=(0.21, 0.25, 0.3, 0.5), kinds=("spo2",)
    )
    assert points[-1].spo2 is not None and points[-1].spo2 > 0.97
    response = fit_oxygen_response(points=points)
    assert response.points_used == 3 and len(response.excluded) == 1
    fit = response.preferred
    assert fit is not None
    left_out = [f for f in fit.points if not f.used]
    assert len(left_out) == 1 and "flat part" in left_out[0].note
    assert left_out[0].residual == pytest.approx(0.0, abs=1e-6)  # exact data: on the curve


def test_oximetry_that_cannot_tell_shunt_from_vq_is_refused_with_the_range() -> None:
    # Two oximetry steps high on the curve with device-estimated FiO2 (± 0.05): the shunt and
    # the V/Q term trade off; the refusal names the range that would have been reported.
    points = generated_points(
        shunt=0.20,
        vq_drop_mmhg=40.0,
        fio2s=(0.25, 0.30),
        kinds=("spo2",),
        fio2_half_range=0.05,
    )
    assert all(p.spo2 is not None and p.spo2 < 0.95 for p in points)
    response = fit_oxygen_response(points=points)
    assert response.two_parameter is None
    assert response.refusal is not None and "not identified" in response.refusal
    assert "95 % range" in response.refusal
    assert response.effective_shunt is not None


def test_identified_fits_respect_the_range_limits() -> None:
    for shunt, drop in TRUTHS:
        points = generated_points(shunt=shunt, vq_drop_mmhg=drop, fio2s=GAS_FIO2S)
        fit = fit_oxygen_response(points=points).two_parameter
        assert fit is not None
        assert fit.shunt.width <= MAX_SHUNT_RANGE_WIDTH
        assert fit.vq_drop_mmhg.width <= MAX_VQ_DROP_RANGE_WIDTH_MMHG
        assert fit.shunt.profile and fit.vq_drop_mmhg.profile


def test_an_uncertain_fio2_widens_a_points_expected_error_and_the_ranges() -> None:
    # Effective variance (Orear 1982): a device-estimated FiO2 (± 0.02) adds the model's slope
    # times the FiO2 error to the point's expected error.
    exact = generated_points(shunt=0.15, vq_drop_mmhg=40.0, fio2s=GAS_FIO2S)
    vague = generated_points(shunt=0.15, vq_drop_mmhg=40.0, fio2s=GAS_FIO2S, fio2_half_range=0.02)
    fit_exact = fit_oxygen_response(points=exact).two_parameter
    fit_vague = fit_oxygen_response(points=vague).two_parameter
    assert fit_exact is not None and fit_vague is not None
    for a, b in zip(fit_exact.points, fit_vague.points, strict=True):
        assert b.expected_error > a.expected_error
    assert fit_vague.shunt.width > fit_exact.shunt.width
    assert fit_vague.vq_drop_mmhg.width > fit_exact.vq_drop_mmhg.width


def test_the_vq_term_is_warranted_only_when_the_points_need_it() -> None:
    # Karbing 2007 compared the one- and two-parameter models by an F test; with known errors
    # the likelihood-ratio χ²(1) is the same comparison.
    rng = random.Random(3)
    shunt_only = generated_points(
        shunt=0.2, vq_drop_mmhg=0.0, fio2s=GAS_FIO2S, rng=rng, pao2_relative_noise=0.03
    )
    vq = generated_points(
        shunt=0.05, vq_drop_mmhg=60.0, fio2s=GAS_FIO2S, rng=rng, pao2_relative_noise=0.03
    )
    p_shunt = fit_oxygen_response(points=shunt_only).vq_term_p_value
    p_vq = fit_oxygen_response(points=vq).vq_term_p_value
    assert p_shunt is not None and p_shunt > 0.05
    assert p_vq is not None and p_vq < 0.001


def test_fit_quality_is_reported_as_a_chi_square_probability() -> None:
    good = generated_points(
        shunt=0.1,
        vq_drop_mmhg=20.0,
        fio2s=(0.3, 0.4, 0.5, 0.7),
        rng=random.Random(5),
        pao2_relative_noise=0.02,
    )
    fit = fit_oxygen_response(points=good).two_parameter
    assert fit is not None and fit.degrees_of_freedom == 2
    assert fit.fit_probability is not None and fit.fit_probability > 0.05
    # One gas far off the curve (PaO2 doubled) makes the fit improbable.
    bad = [*good[:-1], replace(good[-1], pao2_mmhg=2.0 * (good[-1].pao2_mmhg or 0.0))]
    poor = fit_oxygen_response(points=bad).preferred
    assert poor is not None and poor.fit_probability is not None and poor.fit_probability < 0.01


def test_the_fit_does_not_depend_on_the_order_of_the_points() -> None:
    points = generated_points(shunt=0.12, vq_drop_mmhg=35.0, fio2s=(0.3, 0.45, 0.6, 0.8, 1.0))
    forward = fit_oxygen_response(points=points)
    backward = fit_oxygen_response(points=list(reversed(points)))
    assert _two(forward) == pytest.approx(_two(backward))
    assert forward.points_used == 5


def test_points_with_their_own_blood_gas_chemistry_use_their_own_curve() -> None:
    # Gases drawn at pH 7.20 and 38.5 °C: generated on the shifted curve, and fitted back only
    # if the fit shifts each point's curve by its own pH and temperature.
    from service.physiology.oxygen_affinity import oxygen_affinity

    shifted = exchange_conditions(affinity=oxygen_affinity(ph=7.20, temperature_cel=38.5))
    points = [
        replace(p, ph=7.20, temperature_cel=38.5)
        for p in generated_points(
            shunt=0.18, vq_drop_mmhg=25.0, fio2s=(0.3, 0.4, 0.6), conditions=shifted
        )
    ]
    fitted_shunt, fitted_drop = _two(fit_oxygen_response(points=points))
    assert fitted_shunt == pytest.approx(0.18, abs=1e-4)
    assert fitted_drop == pytest.approx(25.0, abs=0.05)


def test_the_av_difference_assumption_moves_the_shunt_exactly_as_stated() -> None:
    # The a-v difference enters only as odds × avd: refitting with avd at the range's ends
    # (3.5 and 7 mL/dL) gives the shunts the sensitivity states, and the same ΔPO2.
    points = generated_points(shunt=0.15, vq_drop_mmhg=40.0, fio2s=GAS_FIO2S)
    fit = fit_oxygen_response(points=points).two_parameter
    assert fit is not None
    (avd,) = [s for s in fit.sensitivities if s.assumption == "av_difference_ml_dl"]
    assert avd.method == "exact"
    for value, stated in ((avd.low_value, avd.shunt_at_low), (avd.high_value, avd.shunt_at_high)):
        refit = fit_oxygen_response(
            points=points, conditions=exchange_conditions(av_difference_ml_dl=value)
        ).two_parameter
        assert refit is not None
        assert refit.shunt.value == pytest.approx(stated, abs=1e-5)
        assert refit.vq_drop_mmhg.value == pytest.approx(fit.vq_drop_mmhg.value, abs=0.01)


def test_the_av_difference_is_varied_over_the_conditions_range_and_a_bad_range_refused() -> None:
    points = generated_points(shunt=0.15, vq_drop_mmhg=40.0, fio2s=GAS_FIO2S)
    conditions = exchange_conditions(av_difference_range_ml_dl=(4.0, 6.0))
    fit = fit_oxygen_response(points=points, conditions=conditions).two_parameter
    assert fit is not None
    (avd,) = [s for s in fit.sensitivities if s.assumption == "av_difference_ml_dl"]
    assert (avd.low_value, avd.high_value) == (4.0, 6.0)
    # The shunt equation: odds' = odds x avd / avd' (exact), checked without the code's helper.
    odds = fit.shunt.value / (1.0 - fit.shunt.value)
    assert avd.shunt_at_low == pytest.approx(odds * 5.0 / 4.0 / (1.0 + odds * 5.0 / 4.0))
    assert avd.shunt_at_high == pytest.approx(odds * 5.0 / 6.0 / (1.0 + odds * 5.0 / 6.0))
    assert ExchangeConditions().av_difference_range_ml_dl == (3.5, 7.0)  # common practice
    for bad in ((6.0, 4.0), (0.1, 5.0), (4.0, 20.0)):
        with pytest.raises(ImpossibleValueError, match="av_difference_range_ml_dl"):
            exchange_conditions(av_difference_range_ml_dl=bad)


def test_the_haemoglobin_and_paco2_assumptions_are_linearised_faithfully() -> None:
    # The linearised sensitivity against real refits 2 g/dL and 5 mmHg away (well inside the
    # reported ranges, where linearisation should hold): within 0.01 of shunt and 2 mmHg.
    points = generated_points(
        shunt=0.15, vq_drop_mmhg=40.0, fio2s=(0.21, 0.25, 0.3, 0.35), kinds=("spo2",)
    )
    fit = fit_oxygen_response(points=points).two_parameter
    assert fit is not None
    by_name = {s.assumption: s for s in fit.sensitivities}
    hb, paco2 = by_name["haemoglobin_g_dl"], by_name["paco2_mmhg"]
    assert hb.method == paco2.method == "linearised at the fit"
    for sensitivity, conditions, delta in (
        (hb, exchange_conditions(haemoglobin_g_dl=16.0), 2.0),
        (paco2, exchange_conditions(assumed_paco2_mmhg=45.0), 5.0),
    ):
        refit = fit_oxygen_response(points=points, conditions=conditions).two_parameter
        assert refit is not None
        span = sensitivity.high_value - sensitivity.assumed_value
        slope_shunt = (sensitivity.shunt_at_high - fit.shunt.value) / span
        slope_drop = (sensitivity.vq_drop_at_high_mmhg - fit.vq_drop_mmhg.value) / span
        assert refit.shunt.value == pytest.approx(fit.shunt.value + slope_shunt * delta, abs=0.01)
        assert refit.vq_drop_mmhg.value == pytest.approx(
            fit.vq_drop_mmhg.value + slope_drop * delta, abs=2.0
        )


def test_measured_values_carry_no_sensitivity() -> None:
    points = generated_points(shunt=0.15, vq_drop_mmhg=40.0, fio2s=GAS_FIO2S)
    measured = exchange_conditions(haemoglobin_g_dl=14.0, av_difference_ml_dl=5.0)
    fit = fit_oxygen_response(points=points, conditions=measured).two_parameter
    assert fit is not None and fit.sensitivities == ()  # gases carry their PaCO2


def test_the_prediction_state_is_the_latest_points() -> None:
    points = generated_points(shunt=0.1, vq_drop_mmhg=20.0, fio2s=(0.3, 0.5), paco2_mmhg=48.0)
    response = fit_oxygen_response(points=points)
    assert response.prediction_paco2_mmhg == 48.0 and not response.prediction_paco2_assumed
    assert response.fio2_span == pytest.approx(0.2)
    spo2_only = fit_oxygen_response(points=[TitrationPoint(START, inspired(0.3), spo2=0.9)])
    assert spo2_only.prediction_paco2_assumed and spo2_only.prediction_paco2_mmhg == 40.0


def test_the_model_itself_round_trips_through_the_fit() -> None:
    # A last check that nothing in the fit's kernels drifts from the public forward model.
    points = generated_points(shunt=0.22, vq_drop_mmhg=12.0, fio2s=GAS_FIO2S)
    fit = fit_oxygen_response(points=points).two_parameter
    assert fit is not None
    for point_fit in fit.points:
        expected = predict_arterial_oxygen(
            shunt_fraction=fit.shunt.value,
            vq_drop_mmhg=fit.vq_drop_mmhg.value,
            fio2=point_fit.point.inspired.fio2,
            paco2_mmhg=40.0,
        ).arterial_po2_mmhg
        assert point_fit.predicted == pytest.approx(expected, rel=1e-9)


def test_impossible_fit_settings_are_refused() -> None:

    with pytest.raises(ImpossibleValueError, match="spo2_sd"):
        fit_oxygen_response(points=[], spo2_sd=0.0)
    with pytest.raises(ImpossibleValueError, match="spo2_informative_max"):
        fit_oxygen_response(points=[], spo2_informative_max=97.0)


def test_a_points_curve_moves_with_its_ph_from_the_bloods_own_standard_p50() -> None:
    # Foetal-type blood (P50 19 mmHg at pH 7.40, 37 °C) titrated at pH 7.25: each point's curve
    # is that P50 moved by Severinghaus eq. 4, so data generated that way fit back exactly. A
    # PaCO2 alone does not move the curve (its pH depends on chronicity).
    from service.physiology.oxygen_affinity import oxygen_affinity

    base = exchange_conditions(affinity=oxygen_affinity(standard_p50_mmhg=19.0))
    acid = exchange_conditions(affinity=oxygen_affinity(ph=7.25, standard_p50_mmhg=19.0))
    assert 19.0 < acid.affinity.p50_mmhg < 26.86
    points = [
        replace(p, ph=7.25)
        for p in generated_points(
            shunt=0.2, vq_drop_mmhg=30.0, fio2s=(0.25, 0.3, 0.4, 0.6), conditions=acid
        )
    ]
    fitted_shunt, fitted_drop = _two(fit_oxygen_response(points=points, conditions=base))
    assert fitted_shunt == pytest.approx(0.2, abs=1e-4)
    assert fitted_drop == pytest.approx(30.0, abs=0.05)
    hypercapnic = generated_points(
        shunt=0.2, vq_drop_mmhg=30.0, fio2s=(0.25, 0.3, 0.4, 0.6), paco2_mmhg=65.0
    )
    fitted_shunt, _ = _two(fit_oxygen_response(points=hypercapnic))
    assert fitted_shunt == pytest.approx(0.2, abs=1e-4)


def test_a_rule_set_may_tighten_the_identifiability_limits() -> None:
    from service.physiology.oxygen_response import IdentifiabilityLimits

    points = generated_points(
        shunt=0.15,
        vq_drop_mmhg=40.0,
        fio2s=GAS_FIO2S,
        rng=random.Random(2),
        pao2_relative_noise=0.05,
    )
    assert fit_oxygen_response(points=points).two_parameter is not None
    strict = IdentifiabilityLimits(max_vq_drop_range_width_mmhg=5.0)
    response = fit_oxygen_response(points=points, limits=strict)
    assert response.two_parameter is None
    assert response.refusal is not None and "limit 5 mmHg wide" in response.refusal
    with pytest.raises(ImpossibleValueError, match="max_shunt_range_width"):
        IdentifiabilityLimits(max_shunt_range_width=2.0)
