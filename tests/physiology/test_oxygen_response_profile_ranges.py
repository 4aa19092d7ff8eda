"""The two-parameter fit's 95 % profile-likelihood ranges (Venzon DJ & Moolgavkar SH, Appl Stat
1988;37:87), checked against the region computed again with scipy.

docs/oxygen-response.md §3: each parameter's range is where the least χ² over the other stays
within the χ²(1) 95 % point (3.841, ``scipy.stats.chi2.ppf(0.95, 1)``) of the minimum, scaled by
χ²/ν when the points scatter more than stated, computed in oxygen-content space. The region is
found again here by ``scipy.optimize`` (bounded minimisation for the profile, Brent's method
for its ends) on the content-space χ² of ``tests.physiology.weighted_fit_reference``. The
service's ΔPO2 ends are bisected to within 1/64 of a bracket found by steps doubling from
5 mmHg (its documented precision); its odds range is the hull of slices across that range,
each end refined between slices.
"""

from __future__ import annotations

import random
from dataclasses import replace
from datetime import timedelta

import pytest
from scipy.optimize import brentq
from scipy.stats import chi2

from service.physiology.oxygen_affinity import oxygen_affinity
from service.physiology.oxygen_exchange import exchange_conditions
from service.physiology.oxygen_response import ModelFit, fit_oxygen_response
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

DELTA_95 = float(chi2.ppf(0.95, 1))
# The shunt range's ends, to a hundredth of the 0.1 % the shunt is shown to (the two codings of
# the curve for a point's own pH differ by about 2e-7 here).
SHUNT_END_TOLERANCE = 1e-5


def _cases() -> dict[str, list[TitrationPoint]]:
    acid = exchange_conditions(affinity=oxygen_affinity(ph=7.25))
    return {
        # five gases, 5 % PaO2 scatter, measured FiO2
        "gases": five_gases(),
        # oximetry and co-oximetry with a device-estimated FiO2 (± 0.04)
        "oximetry-device-fio2": device_oximetry(),
        # oximetry of acidaemic blood (pH 7.25): each point on its own shifted curve
        "oximetry-ph-7.25": [
            replace(p, ph=7.25)
            for p in generated_points(
                shunt=0.2,
                vq_drop_mmhg=30.0,
                fio2s=(0.25, 0.3, 0.4, 0.5),
                kinds=("spo2", "sao2"),
                conditions=acid,
                rng=random.Random(3),
                spo2_noise=0.01,
            )
        ],
        # gases of acidaemic blood (pH 7.25) on a device-estimated FiO2 (± 0.03)
        "gases-ph-7.25-device-fio2": [
            replace(p, ph=7.25)
            for p in generated_points(
                shunt=0.1,
                vq_drop_mmhg=45.0,
                fio2s=(0.24, 0.28, 0.35, 0.45, 0.6),
                conditions=acid,
                rng=random.Random(9),
                pao2_relative_noise=0.04,
                fio2_half_range=0.03,
            )
        ],
        # V/Q mismatch without shunt: the odds held at 0 over much of the region, and the
        # points scatter more than stated (χ²/ν 1.6 scales the region)
        "no-shunt": generated_points(
            shunt=0.0,
            vq_drop_mmhg=60.0,
            fio2s=(0.21, 0.25, 0.3, 0.4),
            rng=random.Random(5),
            pao2_relative_noise=0.05,
        ),
        # three gases from a lung without shunt whose scatter puts the estimate on the shunt's
        # lower limit: the region's ΔPO2 ends are where the profile, with the odds held at 0,
        # rises by 3.84
        "shunt-at-zero": generated_points(
            shunt=0.0,
            vq_drop_mmhg=40.0,
            fio2s=(0.21, 0.25, 0.3),
            rng=random.Random(7),
            pao2_relative_noise=0.05,
        ),
        # four gases from a severely hypoxaemic lung (PaO2 20 mmHg on air): the region's upper
        # ΔPO2 end lies where the lowest point's end-capillary content leaves no room for the
        # shunt, which then caps the odds (mixed venous content above 0)
        "steady-state-edge": [
            TitrationPoint(
                START + timedelta(minutes=10 * i), inspired(f), pao2_mmhg=v, paco2_mmhg=40.0
            )
            for i, (f, v) in enumerate(((0.21, 20.2), (0.3, 53.4), (0.5, 57.8), (0.6, 68.6)))
        ],
        # two co-oximetry steps: a long, tilted region whose least shunt lies at its upper
        # ΔPO2 end
        "two-co-oximetry": [
            TitrationPoint(START, inspired(0.26), sao2=0.927, paco2_mmhg=40.0),
            TitrationPoint(
                START + timedelta(minutes=10), inspired(0.36), sao2=0.970, paco2_mmhg=40.0
            ),
        ],
    }


CASES = _cases()


def _bracket_width(distance: float) -> float:
    """The width of the bracket holding a range end ``distance`` from the estimate, steps
    doubling from 5 mmHg: (0, 5), (5, 10), (10, 20), (20, 40)..."""
    outer = 5.0
    while outer <= distance:
        outer *= 2.0
    return 5.0 if outer == 5.0 else outer / 2.0


@pytest.mark.parametrize("name", list(CASES))
def test_the_profile_ranges_are_the_region_where_chi_square_rises_by_3_84(name: str) -> None:
    points = CASES[name]
    response = fit_oxygen_response(points=points, limits=LOOSE_LIMITS)
    fit = response.two_parameter
    assert fit is not None
    rows = ref.content_rows(points)
    odds, drop = fit.shunt_odds, fit.vq_drop_mmhg.value
    dof = fit.degrees_of_freedom
    inflation = max(1.0, fit.chi_square / dof) if dof > 0 else 1.0
    threshold = ref.content_profile_over_odds(rows, drop) + DELTA_95 * inflation

    def above(d: float) -> float:
        return ref.content_profile_over_odds(rows, d) - threshold

    # ΔPO2: the exact ends (none of these regions reaches the largest ΔPO2 with a steady
    # state), and the service's within its bisection's precision, on the inside.
    low = 0.0 if above(0.0) <= 0.0 else float(brentq(above, 0.0, drop, xtol=1e-9))
    high = float(brentq(above, drop, drop + 70.0, xtol=1e-9))
    for ours, exact in ((fit.vq_drop_mmhg.low, low), (fit.vq_drop_mmhg.high, high)):
        if exact == 0.0:
            assert ours == 0.0
            continue
        tolerance = _bracket_width(abs(exact - drop)) / 64.0
        assert abs(ours - exact) <= tolerance + 1e-6, (ours, exact, tolerance)
        assert above(ours) <= 1e-6  # inside the region

    # The shunt: ends of the profile over ΔPO2 (0 to the service's largest ΔPO2, beyond all
    # these regions), mapped from the odds.
    def above_odds(o: float) -> float:
        return ref.content_profile_over_drop(rows, o, high + 20.0) - threshold

    odds_low = 0.0 if above_odds(0.0) <= 0.0 else float(brentq(above_odds, 0.0, odds, xtol=1e-12))
    odds_high = float(brentq(above_odds, odds, 4.0, xtol=1e-12))
    shunt_low, shunt_high = odds_low / (1.0 + odds_low), odds_high / (1.0 + odds_high)
    assert fit.shunt.low == pytest.approx(shunt_low, abs=SHUNT_END_TOLERANCE)
    assert fit.shunt.high == pytest.approx(shunt_high, abs=SHUNT_END_TOLERANCE)
    assert fit.shunt.low <= fit.shunt.value <= fit.shunt.high
    assert fit.vq_drop_mmhg.low <= drop <= fit.vq_drop_mmhg.high


# Oximetry and gases on a device-estimated FiO2 (± 0.05) whose region runs to a tip at its
# upper ΔPO2 end (the shunt's least value there; the ΔPO2 end's bisection then bounds the
# shunt's to about 1e-4), or to the largest ΔPO2 that leaves a steady state.
DEVICE = 0.05
SHUNT_CASES = {
    "oximetry-region-tip": [
        TitrationPoint(START, inspired(0.25, DEVICE), spo2=0.7699),
        TitrationPoint(START + timedelta(minutes=10), inspired(0.33, DEVICE), sao2=0.8513),
        TitrationPoint(START + timedelta(minutes=20), inspired(0.35, DEVICE), spo2=0.8701),
    ],
    "two-gases-to-the-steady-state-edge": [
        TitrationPoint(START, inspired(0.25, DEVICE), pao2_mmhg=45.9934, paco2_mmhg=40.0),
        TitrationPoint(
            START + timedelta(minutes=10),
            inspired(0.32, DEVICE),
            pao2_mmhg=81.9247,
            paco2_mmhg=40.0,
        ),
    ],
}


def _region_at_the_edge(
    points: list[TitrationPoint],
) -> tuple[ModelFit, list[ref.ContentRow], float, float]:
    """The two-parameter fit of ``points``, the reference's content rows, the χ² threshold of
    its 95 % region, and the largest ΔPO2 with a steady state at no shunt (scipy's Brent)."""
    fit = fit_oxygen_response(points=points).two_parameter
    assert fit is not None
    rows = ref.content_rows(points)
    dof = fit.degrees_of_freedom
    inflation = max(1.0, fit.chi_square / dof) if dof > 0 else 1.0
    drop = fit.vq_drop_mmhg.value
    threshold = ref.content_profile_over_odds(rows, drop) + DELTA_95 * inflation
    edge = float(brentq(lambda d: ref.largest_odds(rows, d), drop, drop + 200.0, xtol=1e-9))
    return fit, rows, threshold, edge


@pytest.mark.parametrize("name", list(SHUNT_CASES))
def test_the_shunt_range_ends_are_the_regions_between_and_beyond_its_slices(name: str) -> None:
    fit, rows, threshold, edge = _region_at_the_edge(SHUNT_CASES[name])

    def above_odds(o: float) -> float:
        return ref.content_profile_over_drop(rows, o, edge) - threshold

    odds_low = 0.0 if above_odds(0.0) <= 0.0 else float(brentq(above_odds, 0.0, fit.shunt_odds))
    odds_high = float(brentq(above_odds, fit.shunt_odds, 4.0, xtol=1e-12))
    assert fit.shunt.low == pytest.approx(odds_low / (1.0 + odds_low), abs=1e-4)
    assert fit.shunt.high == pytest.approx(odds_high / (1.0 + odds_high), abs=1e-4)


def test_the_shunt_range_is_the_regions_over_the_vq_term_range_reported() -> None:
    # Four gases (one severely hypoxaemic on air) whose region ends at the service's largest
    # ΔPO2 (about 1 mmHg short of the steady-state edge, docs/oxygen-response.md), where the shunt's
    # least value lies. The shunt's range is the region's over the ΔPO2 range the fit reports
    # (scipy's profile over ΔPO2 from 0 to its upper end): a slice beyond that end, outside
    # the parameters' limits, may not widen it.
    points = [
        TitrationPoint(START + timedelta(minutes=10 * i), inspired(f), pao2_mmhg=v, paco2_mmhg=40.0)
        for i, (f, v) in enumerate(
            ((0.21, 16.7226), (0.25, 45.9206), (0.3, 75.286), (0.8, 356.7497))
        )
    ]
    fit, rows, threshold, edge = _region_at_the_edge(points)
    assert edge - 1.2 < fit.vq_drop_mmhg.high < edge - 1.0  # the region reaches the limit

    def above_odds(o: float) -> float:
        return ref.content_profile_over_drop(rows, o, fit.vq_drop_mmhg.high) - threshold

    odds_low = float(brentq(above_odds, 0.0, fit.shunt_odds, xtol=1e-12))
    odds_high = float(brentq(above_odds, fit.shunt_odds, 4.0, xtol=1e-12))
    assert fit.shunt.low == pytest.approx(odds_low / (1.0 + odds_low), abs=1e-6)
    assert fit.shunt.high == pytest.approx(odds_high / (1.0 + odds_high), abs=1e-6)
