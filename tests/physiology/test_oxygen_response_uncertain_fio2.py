"""With a device-estimated FiO2 the fit's weights depend on the parameters (effective variance;
Orear J, Am J Phys 1982;50:912, from memory): does the solver still reach the least χ²?

A solver whose gradient treats each point's expected error as a constant stops short of the
minimum of the χ² it reports where the FiO2 term counts (0.934 against scipy's 0.896 in the
first case below, the shunt 0.4 points and ΔPO2 4 mmHg away), and from other starts stalls and
refuses the fit as not converged; the χ²'s own gradient fixed it. Measured FiO2s are checked
against scipy in ``test_oxygen_response.py``.
"""

from __future__ import annotations

from datetime import timedelta

import pytest

from service.physiology.oxygen_response import fit_oxygen_response
from service.physiology.titration import TitrationPoint
from tests.physiology import weighted_fit_reference as ref
from tests.physiology.oxygen_points import (
    LOOSE_LIMITS,
    START,
    device_oximetry,
    inspired,
)


def test_with_a_device_fio2_the_fit_reaches_the_least_chi_square_scipy_finds() -> None:
    points = device_oximetry()
    fit = fit_oxygen_response(points=points, limits=LOOSE_LIMITS).two_parameter
    assert fit is not None
    theirs = ref.fit(ref.rows_of(points), fit_drop=True)
    assert fit.chi_square <= theirs.chi_square + 1e-6 * (1.0 + theirs.chi_square)


def test_the_effective_shunt_of_gases_on_a_device_fio2_is_at_the_least_chi_square() -> None:
    # Three gases on a Venturi-less mask (FiO2 estimated ± 0.05): the one-parameter fit must
    # reach the minimum scipy finds, from wherever its start puts it.
    points = [
        TitrationPoint(
            START + timedelta(minutes=10 * i), inspired(fio2, 0.05), pao2_mmhg=pao2, paco2_mmhg=40.0
        )
        for i, (fio2, pao2) in enumerate(((0.24, 41.4), (0.29, 49.6), (0.33, 52.3)))
    ]
    one = fit_oxygen_response(points=points).effective_shunt
    assert one is not None and one.converged
    theirs = ref.fit(ref.rows_of(points), fit_drop=False, starts=((0.05, 0.0), (0.5, 0.0)))
    assert one.chi_square == pytest.approx(theirs.chi_square, rel=1e-4)
    assert one.shunt.value == pytest.approx(theirs.shunt, abs=5e-4)
