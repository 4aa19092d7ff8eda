"""The two-parameter fit's 95 % profile-likelihood ranges against the profile computed again
independently (``oxygen_fit_reference.ContentProfile``: scipy's bounded minimiser over the
shunt odds, Brent's method for the ends), and the largest ΔPO2 the fit may reach.

The range of ΔPO2 is where the least χ² over the odds stays within 3.841459 (the χ²(1) 95 %
point; Venzon DJ & Moolgavkar SH, Appl Stat 1988;37:87) of its value at the estimate, times
χ²/ν when the fit is worse than its stated errors. The module finds each end as its docstring
says: steps from the estimate doubling from 5 mmHg until one falls outside (or the limit is
reached), then six bisections, keeping the inner end. So each reported end is the inner end
of the 1/64 cell of its bracket that holds the true end, which the tests compute from the
true end; the odds range is the hull of the exact odds intervals on nine evenly spaced ΔPO2
slices of the ΔPO2 range, and the estimate.
"""

from __future__ import annotations

from dataclasses import replace
from functools import cache

import pytest
from scipy.optimize import brentq

import service.physiology.oxygen_response as fitting
from service.physiology.oxygen_exchange import (
    STANDARD_CONDITIONS,
    ExchangeConditions,
    exchange_conditions,
)
from service.physiology.titration import TitrationPoint
from tests import titration_reference as model
from tests.physiology import oxygen_fit_reference as ref
from tests.physiology.oxygen_points import START, generated_points, inspired
from tests.physiology.test_oxygen_response_solver import SCENARIOS, _points

FIRST_STEP_MMHG = 5.0  # the module's documented search: steps doubling from 5 mmHg …
BISECTIONS = 6  # … each end then bisected to 1/64 of its bracket
SLICES = 8  # the odds range from the ΔPO2 range cut in eight

# Two gases of a lung with no shunt and a ΔPO2 of 80 mmHg, on FiO2 0.21 and 0.24 (PaO2 22
# and 44 mmHg): the ΔPO2 range runs up to the largest ΔPO2 with a steady state.
CASES = {
    **{name: _points(name) for name in SCENARIOS},
    "gases-at-the-limit": tuple(generated_points(shunt=0.0, vq_drop_mmhg=80.0, fio2s=(0.21, 0.24))),
}


def _used(points: tuple[TitrationPoint, ...]) -> list[ref.Obs]:
    return [o for o in ref.observations(points) if o.kind != "spo2" or o.value <= 0.97]


@cache
def _solution(name: str) -> fitting._Solution:
    points = CASES[name]
    used = [
        fitting._observation(p, STANDARD_CONDITIONS, 0.02, 0.01)
        for p in points
        if p.spo2 is None or p.spo2 <= 0.97
    ]
    return fitting._solve(used, STANDARD_CONDITIONS, fit_drop=True)


def _threshold(name: str, profile: ref.ContentProfile) -> float:
    solution = _solution(name)
    dof = len(_used(CASES[name])) - 2
    inflation = max(1.0, solution.chi_square / dof) if dof > 0 else 1.0
    return profile.profile(solution.drop) + ref.DELTA_95 * inflation


def _true_end(profile: ref.ContentProfile, threshold: float, start: float, limit: float) -> float:
    """Where the profile χ² crosses ``threshold`` between ``start`` and ``limit`` (Brent)."""
    if profile.profile(limit) <= threshold:
        return limit
    return float(
        brentq(lambda d: profile.profile(d) - threshold, start, limit, xtol=1e-10, rtol=1e-14)
    )


def _searched_end(start: float, limit: float, true_end: float) -> tuple[float, float]:
    """The documented search run on the true region: (the end it reports, its resolution)."""
    if start == limit:
        return limit, 0.0
    direction = 1.0 if limit > start else -1.0

    def inside(d: float) -> bool:
        return direction * (d - true_end) <= 0.0

    inner, step = start, FIRST_STEP_MMHG
    while True:
        trial = start + direction * step
        if direction * (trial - limit) >= 0.0:
            if inside(limit):
                return limit, 0.0
            outer = limit
            break
        if not inside(trial):
            outer = trial
            break
        inner, step = trial, step * 2.0
    for _ in range(BISECTIONS):
        middle = (inner + outer) / 2.0
        inner, outer = (middle, outer) if inside(middle) else (inner, middle)
    return inner, abs(outer - inner)


@pytest.mark.parametrize("name", CASES)
def test_the_vq_range_is_where_the_profile_chi_square_rises_by_3_84(name: str) -> None:
    solution, used = _solution(name), _used(CASES[name])
    assert solution.ranges is not None
    (_, _), (low, high) = solution.ranges
    profile = ref.ContentProfile(used)
    threshold = _threshold(name, profile)
    limit = ref.max_drop(used)
    for reported, end in ((low, 0.0), (high, limit)):
        true_end = _true_end(profile, threshold, solution.drop, end)
        expected, resolution = _searched_end(solution.drop, end, true_end)
        assert reported == pytest.approx(expected, abs=1e-6)
        # The reported end lies inside the region, within the search's resolution of its end.
        assert abs(reported - true_end) <= resolution + 1e-6
        assert profile.profile(reported) <= threshold + 1e-6


def test_the_cases_reach_both_limits_and_neither() -> None:
    # So that the test above sees ends found by bisection, at ΔPO2 0 and at the largest ΔPO2.
    at_zero = at_limit = bisected = 0
    for name, points in CASES.items():
        ranges = _solution(name).ranges
        assert ranges is not None
        low, high = ranges[1]
        limit = ref.max_drop(_used(points))
        at_zero += low == 0.0
        at_limit += high == pytest.approx(limit, abs=1e-6)
        bisected += (low > 0.0) + (high < limit - 1e-6)
    assert at_zero and at_limit and bisected >= 3


@pytest.mark.parametrize("name", CASES)
def test_the_shunt_range_holds_the_hull_of_the_profile_regions_odds(name: str) -> None:
    # The slices' hull is an inner bound of the region; the refinement beside the best slice
    # (its exact ends: test_oxygen_response_profile_ranges.py) can only widen it, and by little.
    solution, used = _solution(name), _used(CASES[name])
    assert solution.ranges is not None
    (odds_low, odds_high), (low, high) = solution.ranges
    profile = ref.ContentProfile(used)
    threshold = _threshold(name, profile)
    hull_low = hull_high = solution.odds
    for i in range(SLICES + 1):
        interval = profile.odds_interval(low + (high - low) * i / SLICES, threshold)
        if interval is not None:
            hull_low, hull_high = min(hull_low, interval[0]), max(hull_high, interval[1])
    assert hull_low - 0.01 < odds_low <= hull_low + 1e-9
    assert hull_high - 1e-9 <= odds_high < hull_high + 0.01


@pytest.mark.parametrize("name", SCENARIOS)
def test_the_reported_ranges_are_the_profile_ranges(name: str) -> None:
    fit = fitting.fit_oxygen_response(points=CASES[name]).two_parameter
    ranges = _solution(name).ranges
    assert fit is not None and ranges is not None
    (odds_low, odds_high), (low, high) = ranges
    assert fit.shunt.profile and fit.vq_drop_mmhg.profile
    assert (fit.vq_drop_mmhg.low, fit.vq_drop_mmhg.high) == (low, high)
    assert fit.shunt.low == pytest.approx(odds_low / (1.0 + odds_low), abs=1e-12)
    assert fit.shunt.high == pytest.approx(odds_high / (1.0 + odds_high), abs=1e-12)


def _observations(
    points: list[TitrationPoint], conditions: ExchangeConditions
) -> list[fitting._Observation]:
    return [fitting._observation(p, conditions, 0.02, 0.01) for p in points]


def test_the_largest_vq_drop_leaves_every_point_a_steady_state() -> None:
    # The lowest alveolar PO2 binds (FiO2 0.21, PaCO2 55), not the first point's; a point at
    # pH 7.20 has its own curve (Severinghaus 1979 eq. 4), which needs a higher PO2 to carry
    # the a-v difference.
    points = [
        TitrationPoint(START, inspired(0.4), pao2_mmhg=70.0, paco2_mmhg=40.0),
        TitrationPoint(START, inspired(0.21), pao2_mmhg=50.0, paco2_mmhg=55.0),
        TitrationPoint(START, inspired(0.3), pao2_mmhg=60.0, paco2_mmhg=40.0),
    ]
    obs = ref.observations(points)
    expected = ref.max_drop(obs)
    assert 0.0 < expected < min(o.alveolar for o in obs) - 5.0
    assert fitting._max_drop(_observations(points, STANDARD_CONDITIONS), STANDARD_CONDITIONS) == (
        pytest.approx(expected, abs=1e-6)
    )
    acid = [replace(p, ph=7.20) for p in points]
    p50 = model.p50_at_ph(7.20)
    needed = brentq(lambda p: model.saturation(p, p50) - ref.AVD / ref.KH, 1e-6, 500.0, xtol=1e-12)
    expected_acid = min(o.alveolar - needed for o in obs) - 1.0
    got = fitting._max_drop(_observations(acid, STANDARD_CONDITIONS), STANDARD_CONDITIONS)
    assert got == pytest.approx(expected_acid, abs=1e-3)


@pytest.mark.parametrize(
    "haemoglobin",
    [
        # Hb 4 g/dL: full blood carries only 5.36 mL/dL, so the a-v difference of 5 needs a
        # saturation of 0.933.
        4.0,
        # Hb 3.5 g/dL: not even full saturation carries 5 mL/dL; the module asks for 0.999,
        # the dissolved oxygen of a high PO2 doing the rest.
        3.5,
    ],
)
def test_the_largest_vq_drop_in_severe_anaemia(haemoglobin: float) -> None:
    conditions = exchange_conditions(haemoglobin_g_dl=haemoglobin)
    points = [TitrationPoint(START, inspired(0.5), pao2_mmhg=200.0, paco2_mmhg=40.0)]
    got = fitting._max_drop(_observations(points, conditions), conditions)
    expected = ref.max_drop(ref.observations(points), hb=haemoglobin)
    assert 0.0 < expected < 700.0  # not clipped by the V/Q term's limits
    assert got == pytest.approx(expected, abs=1e-3)
