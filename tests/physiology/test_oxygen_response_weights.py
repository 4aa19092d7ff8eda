"""The oxygen-response fit's weights, χ², estimate and linearised statistics, checked against
the objective written out again with scipy (``tests.physiology.weighted_fit_reference``)."""

from __future__ import annotations

import math
import random

import numpy as np
import pytest
from scipy.stats import chi2, norm

from service.physiology.oxygen_response import (
    DELTA_CHI_SQUARE_95,
    Z_95,
    FitModel,
    fit_oxygen_response,
)
from service.physiology.titration import TitrationPoint
from tests.physiology import weighted_fit_reference as ref
from tests.physiology.oxygen_points import (
    LOOSE_LIMITS,
    START,
    device_oximetry,
    five_gases,
    generated_points,
    inspired,
)

GASES = five_gases()  # a Venturi titration, FiO2 measured
MIXED = device_oximetry()  # where the FiO2 error dominates a point's expected error
# Oximetry and co-oximetry on measured FiO2s.
OXIMETRY = generated_points(
    shunt=0.25,
    vq_drop_mmhg=20.0,
    fio2s=(0.21, 0.3, 0.4, 0.5, 0.6),
    kinds=("spo2", "sao2"),
    rng=random.Random(6),
    spo2_noise=0.01,
)


def test_the_statistical_constants_are_the_normal_and_chi_square_quantiles() -> None:
    # The 95 % two-sided normal quantile and the χ²(1) upper 5 % point (scipy.stats; a profile
    # range is where χ² rises by the χ²(1) quantile, Venzon & Moolgavkar 1988).
    assert pytest.approx(norm.ppf(0.975), abs=1e-6) == Z_95
    assert pytest.approx(chi2.ppf(0.95, 1), abs=1e-6) == DELTA_CHI_SQUARE_95


@pytest.mark.parametrize("points", [GASES, MIXED], ids=["gases", "oximetry-device-fio2"])
def test_each_points_expected_error_is_its_documented_sd_and_the_fio2_term(
    points: list[TitrationPoint],
) -> None:
    # docs/oxygen-response.md §3: SpO2 0.02, SaO2 0.01, PaO2 √(2² + (5 % of PaO2)²) mmHg,
    # combined with the model's slope in FiO2 times the FiO2 SD (effective variance, Orear
    # 1982); the slope here by a central difference on the independent model.
    fit = fit_oxygen_response(points=points, limits=LOOSE_LIMITS).two_parameter
    assert fit is not None
    odds = fit.shunt_odds
    rows = ref.rows_of(points)
    used = [f for f in fit.points if f.used]
    assert len(rows) == len(used) >= 4
    for row, point_fit in zip(rows, used, strict=True):
        expected = ref.expected_error(row, odds, fit.vq_drop_mmhg.value)
        assert point_fit.expected_error == pytest.approx(expected, rel=2e-4)
        assert point_fit.predicted == pytest.approx(
            ref.predicted(row, odds, fit.vq_drop_mmhg.value), rel=2e-4
        )
    if points is MIXED:
        # the FiO2 term counts: on the steepest point it adds a third to the SpO2's own 0.02
        assert used[0].expected_error > 1.3 * ref.SPO2_SD


def test_measured_fio2_gives_each_kind_exactly_its_own_sd() -> None:
    points = [
        TitrationPoint(START, inspired(0.3), spo2=0.9),
        TitrationPoint(START.replace(minute=10), inspired(0.4), sao2=0.93, paco2_mmhg=40.0),
        TitrationPoint(START.replace(minute=20), inspired(0.5), pao2_mmhg=80.0, paco2_mmhg=40.0),
    ]
    response = fit_oxygen_response(points=points, limits=LOOSE_LIMITS)
    for fit in (response.two_parameter, response.effective_shunt):
        assert fit is not None
        errors = [f.expected_error for f in fit.points]
        assert errors == [0.02, 0.01, pytest.approx(math.hypot(2.0, 4.0), rel=1e-12)]


@pytest.mark.parametrize("points", [GASES, OXIMETRY], ids=["gases", "oximetry"])
def test_both_fits_reach_the_least_chi_square_scipy_finds(points: list[TitrationPoint]) -> None:
    response = fit_oxygen_response(points=points, limits=LOOSE_LIMITS)
    two, one = response.two_parameter, response.effective_shunt
    assert two is not None and one is not None
    rows = ref.rows_of(points)
    theirs_two = ref.fit(rows, fit_drop=True)
    theirs_one = ref.fit(rows, fit_drop=False)
    for ours, theirs in ((two, theirs_two), (one, theirs_one)):
        assert ours.shunt.value == pytest.approx(theirs.shunt, abs=2e-4)
        assert ours.vq_drop_mmhg.value == pytest.approx(theirs.drop, abs=0.05)
        assert ours.chi_square == pytest.approx(theirs.chi_square, rel=1e-3)
        assert ours.chi_square == pytest.approx(
            sum(f.standardised_residual**2 for f in ours.points if f.used), rel=1e-9
        )
        assert ours.fit_probability == pytest.approx(
            chi2.sf(ours.chi_square, ours.degrees_of_freedom), rel=1e-6
        )
    # The V/Q term's likelihood-ratio test (Karbing 2007 used the F test; with stated errors
    # χ²(1) of the fall in χ²), on scipy's two minima.
    assert response.vq_term_p_value == pytest.approx(
        chi2.sf(theirs_one.chi_square - theirs_two.chi_square, 1), rel=2e-3
    )


def test_the_correlation_of_the_estimates_is_that_of_the_inverse_information() -> None:
    response = fit_oxygen_response(points=GASES)
    two, one = response.two_parameter, response.effective_shunt
    assert two is not None and one is not None
    theirs = ref.fit(ref.rows_of(GASES), fit_drop=True)
    cov = theirs.covariance()
    assert two.correlation == pytest.approx(cov[0, 1] / math.sqrt(cov[0, 0] * cov[1, 1]), abs=1e-3)
    assert -1.0 < two.correlation < 0.0  # more shunt trades for less ΔPO2
    assert one.correlation == 0.0  # ΔPO2 held: nothing to correlate with


@pytest.mark.parametrize("points", [GASES, MIXED], ids=["gases", "oximetry-device-fio2"])
def test_the_effective_shunt_range_is_z95_linearised_standard_errors_on_the_odds(
    points: list[TitrationPoint],
) -> None:
    # docs/oxygen-response.md §3: the effective shunt keeps ± 1.96 SE, computed on the odds
    # and mapped back, scaled by χ²/ν when the points scatter more than stated.
    one = fit_oxygen_response(points=points).effective_shunt
    assert one is not None and one.model is FitModel.EFFECTIVE_SHUNT
    theirs = ref.fit(ref.rows_of(points), fit_drop=False)
    dof = len(ref.rows_of(points)) - 1
    se_odds = math.sqrt(float(theirs.covariance()[0, 0]) * max(1.0, theirs.chi_square / dof))
    z = float(norm.ppf(0.975))
    low, high = theirs.odds - z * se_odds, theirs.odds + z * se_odds
    assert one.shunt.low == pytest.approx(low / (1.0 + low), abs=2e-4)
    assert one.shunt.high == pytest.approx(high / (1.0 + high), abs=2e-4)
    assert one.shunt.standard_error == pytest.approx(se_odds / (1.0 + theirs.odds) ** 2, rel=2e-3)
    assert not one.shunt.fixed and not one.shunt.profile
    assert one.vq_drop_mmhg.fixed and not one.vq_drop_mmhg.profile
    assert (one.vq_drop_mmhg.value, one.vq_drop_mmhg.low, one.vq_drop_mmhg.high) == (0.0, 0.0, 0.0)


def test_the_two_parameter_estimates_are_fitted_with_profile_ranges() -> None:
    two = fit_oxygen_response(points=GASES).two_parameter
    assert two is not None
    for estimate in (two.shunt, two.vq_drop_mmhg):
        assert not estimate.fixed and estimate.profile
        assert estimate.low < estimate.value < estimate.high


def test_the_covariance_is_that_of_the_odds_and_drop_np() -> None:
    # a guard that the fitted odds are those of the shunt reported
    two = fit_oxygen_response(points=GASES).two_parameter
    assert two is not None
    assert two.shunt.value == pytest.approx(two.shunt_odds / (1.0 + two.shunt_odds), rel=1e-12)
    assert np.isfinite(two.covariance).all()
