"""The fitted facts' accepted ranges in the catalogue (service/assess/titration.py,
``FITTED_FACTS``): each is the range of what the titration can produce, read from the owner of
that limit (one fact, one owner), and nothing outside it is accepted.

Owners: the model's parameter limits (``oxygen_exchange``: shunt 0–0.95, ΔPO2 0–700 mmHg), the
point budget of a fit (``titration.MAX_POINTS``), and the natural domains of a percentage, a
fraction and a probability.
"""

from __future__ import annotations

import math

import pytest

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.assess.titration import FITTED_FACTS, MAX_POINTS
from service.engine.facts import FactKind
from service.physiology.oxygen_exchange import SHUNT_LIMITS, VQ_DROP_LIMITS_MMHG

COUNTS = ("titration_points", "titration_fio2_levels", "titration_fio2_known_levels")
DROPS = (
    "fitted_vq_drop",
    "fitted_vq_drop_least",
    "fitted_vq_drop_most",
    "vq_drop_upper_limit",
)
EXCESSES = ("fitted_vq_drop_excess_least", "fitted_vq_drop_excess_most")
SHUNTS = (
    "fitted_shunt",
    "fitted_shunt_least",
    "fitted_shunt_most",
    "effective_shunt",
    "effective_shunt_least",
    "effective_shunt_most",
)
FRACTIONS = (
    "titration_fio2_span",
    "titration_fio2_highest",
    "titration_fit_probability",
    "predicted_fio2_for_target",
    "predicted_fio2_for_target_least",
    "predicted_fio2_for_target_most",
    "predicted_fio2_for_hypercapnic_target",
    "predicted_fio2_for_hypercapnic_target_least",
    "predicted_fio2_for_hypercapnic_target_most",
)


def _range(name: str) -> tuple[float, float]:
    spec = DEFAULT_CATALOGUE[name]
    assert spec.kind is FactKind.QUANTITY
    assert spec.minimum is not None and spec.maximum is not None
    return spec.minimum, spec.maximum


def test_every_fitted_quantity_is_in_one_of_the_groups_checked_here() -> None:
    quantities = {s.name for s in FITTED_FACTS if s.kind is FactKind.QUANTITY}
    assert quantities == {*COUNTS, *DROPS, *EXCESSES, *SHUNTS, *FRACTIONS}


@pytest.mark.parametrize("name", COUNTS)
def test_a_count_runs_to_the_points_one_fit_takes(name: str) -> None:
    # A fit takes at most MAX_POINTS points, so no count of its points or levels exceeds it.
    assert _range(name) == (0.0, float(MAX_POINTS))
    spec = DEFAULT_CATALOGUE[name]
    assert spec.problem(float(MAX_POINTS)) is None
    assert spec.problem(float(MAX_POINTS + 1)) is not None


@pytest.mark.parametrize("name", DROPS)
def test_a_vq_term_runs_over_the_models_limits(name: str) -> None:
    assert _range(name) == VQ_DROP_LIMITS_MMHG


@pytest.mark.parametrize("name", EXCESSES)
def test_an_excess_over_the_healthy_limit_runs_both_ways_over_the_models_limits(
    name: str,
) -> None:
    # least/most minus a healthy limit that lies itself within the model's ΔPO2 limits.
    high = VQ_DROP_LIMITS_MMHG[1] - VQ_DROP_LIMITS_MMHG[0]
    assert _range(name) == (-high, high)


@pytest.mark.parametrize("name", SHUNTS)
def test_a_shunt_is_a_percentage_that_holds_the_models_limits(name: str) -> None:
    low, high = _range(name)
    assert (low, high) == (0.0, 100.0)  # a percentage
    assert low <= 100.0 * SHUNT_LIMITS[0] and 100.0 * SHUNT_LIMITS[1] <= high
    spec = DEFAULT_CATALOGUE[name]
    assert spec.problem(100.0) is None
    assert spec.problem(math.nextafter(100.0, 200.0)) is not None
    assert spec.problem(-0.001) is not None


@pytest.mark.parametrize("name", FRACTIONS)
def test_a_fraction_or_a_probability_runs_from_0_to_1(name: str) -> None:
    assert _range(name) == (0.0, 1.0)
    spec = DEFAULT_CATALOGUE[name]
    assert spec.problem(1.0) is None and spec.problem(0.0) is None
    assert spec.problem(math.nextafter(1.0, 2.0)) is not None
