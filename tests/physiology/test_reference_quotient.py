"""The healthy lung under another respiratory quotient, solved again independently.

With R 0.8 the room-air anchor (Cerveri I et al., Am J Respir Crit Care Med 1995;152:934)
decides the healthy lung below 50 years; with a higher R the room-air alveolar PO2 is higher,
and between 25 and 50 years the 100 %-oxygen anchor of the two male age groups ("Gas exchange
in two male age groups", Upsala J Med Sci, abstract: A-a 48 mmHg at mean age 25, 93 at 50)
binds too. The independent solve is that of tests/physiology/test_reference.py (scipy's Brent
method over tests/titration_reference.py's oxygen cascade) with R as a parameter of the full
alveolar gas equation.
"""

from __future__ import annotations

import pytest

from service.physiology import reference as r
from tests import titration_reference as tr


def _alveolar(fio2: float, r_quotient: float) -> float:
    # The full alveolar gas equation (PaCO2 40, PB 760, PH2O at 37 °C from iapws).
    return fio2 * (760.0 - tr.ph2o_37_mmhg()) - 40.0 * (fio2 + (1.0 - fio2) / r_quotient)


def _mean_lung(age: float, r_quotient: float) -> tuple[float, float]:
    """(shunt, V/Q term) of the mean healthy lung meeting both anchors (or the room-air one
    alone where the oxygen anchor's shunt already lowers the room-air PaO2 below it)."""
    air, oxygen = _alveolar(0.21, r_quotient), _alveolar(1.0, r_quotient)
    air_target = 143.6 - 0.39 * age - 0.56 * 25.0 - 0.57 * 40.0  # Cerveri 1995 mean
    oxygen_target = oxygen - (48.0 + (93.0 - 48.0) * (min(age, 50.0) - 25.0) / 25.0)
    return tr.lung_meeting(air, oxygen, air_target, oxygen_target)


@pytest.mark.parametrize("age", [30, 40])
def test_with_r_1_the_oxygen_anchor_of_the_young_group_binds(age: int) -> None:
    shunt, drop = _mean_lung(float(age), 1.0)
    assert drop > 0.5  # both anchors met: a V/Q term is needed
    lung = r.healthy_lung(age, False, 1.0)
    assert lung.shunt_odds / (1.0 + lung.shunt_odds) == pytest.approx(shunt, abs=1e-6)
    assert lung.vq_drop_mmhg == pytest.approx(drop, abs=1e-3)
    oxygen = _alveolar(1.0, 1.0)
    normal = r.normal_aa_gradient(age_years=age, alveolar_po2_mmhg=oxygen, respiratory_quotient=1.0)
    assert normal.expected == pytest.approx(oxygen - tr.pao2_at(oxygen, shunt, drop), abs=0.01)
