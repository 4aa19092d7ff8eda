"""A gas carried to another FiO2 by its effective shunt, on a shifted curve, against the model
written again independently (``tests/titration_reference.py``), and the edge of its domain."""

from __future__ import annotations

import pytest

from service.exceptions import OutsideModelRangeError
from service.physiology.oxygen_affinity import STANDARD_P50_MMHG, OxygenAffinity
from service.physiology.oxygen_exchange import exchange_conditions
from service.physiology.oxygen_projection import ProjectedGas, project_gas
from tests import titration_reference as ref

PB, PH2O, PACO2 = 760.0, 47.0, 40.0


@pytest.mark.parametrize("p50", [20.0, 40.0])
def test_on_a_shifted_curve_the_gas_and_its_room_air_projection_are_the_reference_ones(
    p50: float,
) -> None:
    # The saturation of the gas on its own FiO2 is Severinghaus 1979 eq. 1 on the blood's
    # curve, and its projection to room air the reference's effective-shunt projection
    # (Karbing 2007) on that curve. The service's curve is eq. 1 with PO2 × 26.86 / P50; the
    # reference is given the same multiplier on its own P50.
    curve = OxygenAffinity(p50, "test curve")
    reference_p50 = ref.p50_eq1() * p50 / STANDARD_P50_MMHG

    def projected(target_fio2: float) -> ProjectedGas:
        return project_gas(
            arterial_po2_mmhg=70.0,
            fio2=0.5,
            paco2_mmhg=PACO2,
            target_fio2=target_fio2,
            conditions=exchange_conditions(),
            affinity=curve,
        )

    itself = projected(0.5)
    assert itself.arterial_po2_mmhg == 70.0
    assert itself.arterial_saturation == pytest.approx(
        ref.saturation(70.0, reference_p50), abs=1e-12
    )
    on_air = projected(0.21)
    assert on_air.arterial_po2_mmhg == pytest.approx(
        ref.room_air_projection(
            pao2=70.0, fio2=0.5, paco2=PACO2, pb=PB, ph2o=PH2O, p50=reference_p50
        ),
        abs=1e-6,
    )


def test_an_alveolar_po2_of_exactly_zero_is_outside_the_model() -> None:
    # "The alveolar PO2 on either FiO2 at or below zero" is refused. With R 1.0 the alveolar
    # gas equation is FiO2 (PB − PH2O) − PaCO2, exactly zero for FiO2 0.5 of 700 mmHg of dry
    # gas and a PaCO2 of 350 mmHg (while FiO2 1.0 would leave 350 mmHg).
    conditions = exchange_conditions(
        barometric_mmhg=747.0, water_vapour_mmhg=47.0, respiratory_quotient=1.0
    )
    with pytest.raises(OutsideModelRangeError):
        project_gas(
            arterial_po2_mmhg=40.0,
            fio2=0.5,
            paco2_mmhg=350.0,
            target_fio2=1.0,
            conditions=conditions,
        )
