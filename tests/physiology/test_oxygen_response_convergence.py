"""A known defect of the oxygen-response solver, kept as an expected failure until fixed.

With a device-estimated FiO2 each point's expected error depends on the parameters (the
"effective variance" of an uncertain abscissa; Orear J, Am J Phys 1982;50:912, from memory),
but the solver's gradient Jᵀr holds those errors fixed. Where they matter the gradient it
uses is not the χ²'s (here −0.12 against a central-difference 0.034 at the point where it
stops), no step lowers the χ², the damping runs out and the fit is reported "not converged":
for the two-parameter fit a refusal, for the effective shunt an unconverged estimate. A least-
squares problem in one smooth parameter always has a minimum to converge to.
"""

from __future__ import annotations

from datetime import timedelta

import pytest

from service.physiology.oxygen_response import fit_oxygen_response
from service.physiology.titration import TitrationPoint
from tests.physiology.oxygen_points import START, inspired

# Three gases on device-estimated FiO2s (± 0.03): invented, like every fixture.
GASES = [
    TitrationPoint(
        START + timedelta(minutes=10 * i), inspired(fio2, 0.03), pao2_mmhg=pao2, paco2_mmhg=40.0
    )
    for i, (fio2, pao2) in enumerate(((0.32, 60.94), (0.42, 56.97), (0.48, 65.31)))
]


@pytest.mark.xfail(
    reason="solver gradient ignores the parameter-dependent effective variance", strict=False
)
def test_the_effective_shunt_converges_with_device_estimated_fio2s() -> None:
    fit = fit_oxygen_response(points=GASES).effective_shunt
    assert fit is not None and fit.converged
