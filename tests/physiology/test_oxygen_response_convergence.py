"""Two solver defects found by the mutation work, fixed since (the χ²'s own gradient with a
parameter-dependent error, and the re-run from the effective shunt): kept as tests.

With a device-estimated FiO2 each point's expected error depends on the parameters (the
"effective variance" of an uncertain abscissa; Orear J, Am J Phys 1982;50:912, from memory);
a gradient that held those errors fixed was not the χ²'s, no step lowered the χ², and the fit
was reported "not converged". A least-squares problem in one smooth parameter always has a
minimum to converge to.

Second: a minimum on the curved limit of the model's steady state (mixed venous content zero)
could be missed by a solver bounded by boxes only; the two-parameter least χ² can never be
above its nested effective shunt's.
"""

from __future__ import annotations

from datetime import timedelta

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


def test_the_effective_shunt_converges_with_device_estimated_fio2s() -> None:
    fit = fit_oxygen_response(points=GASES).effective_shunt
    assert fit is not None and fit.converged


def test_the_two_parameter_fit_is_never_worse_than_its_nested_effective_shunt() -> None:
    # The effective shunt is the two-parameter model with ΔPO2 held at 0, so the two-parameter
    # least χ² can only be lower or equal. A wide measured a-v difference (10 mL/dL) and
    # saturations of 0.50 and 0.62 on FiO2 0.21 and 0.30 put the minimum on the limit where
    # the mixed venous content reaches zero; the solver, bounded only by boxes, crawls along
    # that curved limit and stops (small steps) at χ² 72.6 against 43.6 for the nested fit.
    from service.physiology.oxygen_exchange import exchange_conditions

    points = [
        TitrationPoint(START, inspired(0.21), sao2=0.50, paco2_mmhg=40.0),
        TitrationPoint(START + timedelta(minutes=10), inspired(0.30), sao2=0.62, paco2_mmhg=40.0),
    ]
    response = fit_oxygen_response(
        points=points, conditions=exchange_conditions(av_difference_ml_dl=10.0)
    )
    two, one = response.two_parameter, response.effective_shunt
    assert two is not None and one is not None
    assert two.chi_square <= one.chi_square + 1e-6
