"""When the oxygen-response fit refuses the two-parameter model, and which settings a caller
may pass: the identifiability widths of docs/oxygen-response.md §3 at their edges, and the
possible ranges of the fit's settings."""

from __future__ import annotations

import math
import random

import numpy as np
import pytest

from service.exceptions import ImpossibleValueError
from service.physiology.oxygen_exchange import (
    SHUNT_LIMITS,
    VQ_DROP_LIMITS_MMHG,
    exchange_conditions,
)
from service.physiology.oxygen_response import (
    IdentifiabilityLimits,
    Refusal,
    fit_oxygen_response,
)
from service.physiology.titration import TitrationPoint
from service.physiology.units import FIO2_LIMITS
from tests.physiology.oxygen_points import LOOSE_LIMITS, START, generated_points, inspired


def test_a_shunt_range_just_wider_than_20_points_is_refused() -> None:
    # docs/oxygen-response.md §3 rule 4: refused when the shunt's 95 % range is wider than
    # 0.20 (a range of 20 points cannot tell a normal shunt, < 8 % (Smith & Jones 2001), from
    # an ARDS-sized one). Three noisy oximetry steps whose range is 0.21 wide.
    points = generated_points(
        shunt=0.07,
        vq_drop_mmhg=35.0,
        fio2s=(0.25, 0.3, 0.35),
        kinds=("spo2",),
        rng=random.Random(121),
        spo2_noise=0.01,
    )
    loose = fit_oxygen_response(points=points, limits=LOOSE_LIMITS).two_parameter
    assert loose is not None
    assert 0.20 < loose.shunt.width < 0.215 and loose.vq_drop_mmhg.width < 75.0
    response = fit_oxygen_response(points=points)
    assert response.two_parameter is None
    assert response.refusal_reason is Refusal.SHUNT_RANGE_WIDE
    assert response.refusal is not None and "limit 20% wide" in response.refusal


def test_a_vq_range_just_wider_than_10_kpa_is_refused() -> None:
    # Rule 4: refused when the 95 % range of ΔPO2 is wider than 75 mmHg (10 kPa, the distance
    # from the normal right shift to the mean in bronchopulmonary dysplasia; Quine 2006).
    points = generated_points(
        shunt=0.19,
        vq_drop_mmhg=8.0,
        fio2s=(0.3, 0.4, 0.5),
        rng=random.Random(48),
        pao2_relative_noise=0.05,
    )
    loose = fit_oxygen_response(points=points, limits=LOOSE_LIMITS).two_parameter
    assert loose is not None
    assert 75.0 < loose.vq_drop_mmhg.width < 80.0 and loose.shunt.width < 0.2
    response = fit_oxygen_response(points=points)
    assert response.two_parameter is None
    assert response.refusal_reason is Refusal.VQ_RANGE_WIDE
    assert response.refusal is not None and "limit 75 mmHg wide" in response.refusal


def test_the_identifiability_settings_may_range_up_to_the_models_own_limits() -> None:
    # A rule set may set each width anywhere from a tight value to the model's whole range:
    # the shunt 0–0.95 and ΔPO2 0–700 mmHg (oxygen_exchange), the FiO2 0.10–1.0 (units).
    widest_shunt = SHUNT_LIMITS[1] - SHUNT_LIMITS[0]
    widest_drop = VQ_DROP_LIMITS_MMHG[1] - VQ_DROP_LIMITS_MMHG[0]
    widest_span = FIO2_LIMITS[1] - FIO2_LIMITS[0]
    assert (widest_shunt, widest_drop) == (0.95, 700.0)
    assert widest_span == pytest.approx(0.9)
    IdentifiabilityLimits(
        min_fio2_span=widest_span,
        max_shunt_range_width=widest_shunt,
        max_vq_drop_range_width_mmhg=widest_drop,
    )
    # the tight ends: no FiO2 span required, one point of shunt, 1 mmHg of ΔPO2
    IdentifiabilityLimits(
        min_fio2_span=0.0, max_shunt_range_width=0.01, max_vq_drop_range_width_mmhg=1.0
    )
    beyond = (
        {"min_fio2_span": widest_span + 0.05},
        {"min_fio2_span": -0.01},
        {"max_shunt_range_width": widest_shunt + 0.05},
        {"max_shunt_range_width": 0.0095},
        {"max_vq_drop_range_width_mmhg": widest_drop + 35.0},
        {"max_vq_drop_range_width_mmhg": 0.95},
    )
    for settings in beyond:
        (name,) = settings
        with pytest.raises(ImpossibleValueError, match=name):
            IdentifiabilityLimits(**settings)


def test_the_fit_settings_accept_their_possible_range_and_refuse_beyond_it() -> None:
    # The SpO2 limit is a saturation (0.5–1: below 0.5 the whole steep part of the curve would
    # be left out); the measurement SDs are fractions of saturation from 0.001 to 0.2.
    points = [
        TitrationPoint(START, inspired(0.3), spo2=0.9),
        TitrationPoint(START.replace(minute=10), inspired(0.4), spo2=0.95),
    ]
    for settings in (
        {"spo2_informative_max": 0.5},
        {"spo2_informative_max": 1.0},
        {"spo2_sd": 0.001, "sao2_sd": 0.001},
        {"spo2_sd": 0.2, "sao2_sd": 0.2},
    ):
        fit_oxygen_response(points=points, **settings)  # type: ignore[arg-type]
    for settings in (
        {"spo2_informative_max": 0.47},
        {"spo2_informative_max": 1.05},
        {"spo2_sd": 0.00095},
        {"spo2_sd": 0.21},
        {"sao2_sd": 0.00095},
        {"sao2_sd": 0.21},
    ):
        (name,) = settings
        with pytest.raises(ImpossibleValueError, match=name):
            fit_oxygen_response(points=points, **settings)  # type: ignore[arg-type]


def test_a_shunt_above_the_odds_of_0_86_is_fitted_up_to_the_models_limit() -> None:
    # The shunt is bounded only by the model's 0.95 (SHUNT_LIMITS): with Hb 20 g/dL and an
    # a-v difference of 1.5 mL/dL a steady state exists at a shunt of 0.9 (CaO2 = Cc'O2 − 9 ×
    # 1.5 > 0), and exact gases from it fit back.
    conditions = exchange_conditions(haemoglobin_g_dl=20.0, av_difference_ml_dl=1.5)
    points = generated_points(
        shunt=0.9, vq_drop_mmhg=0.0, fio2s=(0.6, 0.8, 1.0), conditions=conditions
    )
    response = fit_oxygen_response(points=points, conditions=conditions)
    one = response.effective_shunt
    assert one is not None
    assert one.shunt.value == pytest.approx(0.9, abs=1e-4)


def test_a_co_oximeter_reading_full_saturation_is_fitted() -> None:
    # An SaO2 of 100 % is a possible co-oximeter reading on oxygen (intake accepts saturations
    # up to 1.0); only SpO2 above 97 % is left out of the fit. It must be fitted, and sit on
    # the flat top of the curve within its 0.01.
    points = [
        TitrationPoint(START, inspired(0.3), sao2=0.85, paco2_mmhg=40.0),
        TitrationPoint(START.replace(minute=10), inspired(0.6), sao2=0.97, paco2_mmhg=40.0),
        TitrationPoint(START.replace(minute=20), inspired(1.0), sao2=1.0, paco2_mmhg=40.0),
    ]
    response = fit_oxygen_response(points=points)
    assert response.points_used == 3 and response.two_parameter is not None
    top = response.two_parameter.points[-1]
    assert top.used and abs(top.residual) < 0.01


@pytest.mark.parametrize(
    ("reciprocal_condition", "separable"), [(1.05e-10, True), (0.95e-10, False)]
)
def test_the_information_matrix_counts_as_singular_below_a_reciprocal_condition_of_1e_10(
    reciprocal_condition: float, separable: bool
) -> None:
    # docs/oxygen-response.md §3 rule 3: refused as not separable when the reciprocal
    # condition number of JᵀJ is below 1e-10. Jacobian columns (1, ∓√r, 0), whose JᵀJ has the
    # eigenvalues 2 and 2r; its condition checked with numpy.
    from service.physiology.oxygen_response import _covariance

    small = math.sqrt(reciprocal_condition)
    j_odds = [1.0, -small, 0.0]
    j_drop = [1.0, small, 0.0]
    jacobian = np.column_stack([j_odds, j_drop])
    jtj = jacobian.T @ jacobian
    assert 1.0 / np.linalg.cond(jtj) == pytest.approx(reciprocal_condition, rel=1e-4)
    var_odds, _, var_drop = _covariance(j_odds, j_drop)
    assert math.isfinite(var_odds) is separable
    assert math.isfinite(var_drop) is separable
