"""The range of an assumed barometric pressure narrowed by the PaO2 (service/assess/
uncertainty.py): a PaO2 cannot exceed the alveolar PO2 by more than the rule set's tolerance,
so the lowest pressure considered is the one at which the alveolar gas equation (full form,
R 0.8; West, Respiratory Physiology) gives the PaO2 less the tolerance."""

from __future__ import annotations

import pytest

from service.assess import uncertainty as u
from service.config import Settings
from service.intake.model import Quantity as Q
from tests.titration_reference import R

from .builders import m
from .test_slips import gas

TOLERANCE = 5.0  # mm[Hg] a PaO2 may exceed the alveolar PO2 (the rule set's parameter)


def test_the_pao2_raises_the_low_end_of_an_assumed_pressure() -> None:
    # PaO2 90 mmHg on air with PaCO2 40: PAO2 = 0.21 (PB - PH2O) - 40 (0.21 + 0.79 / 0.8)
    # reaches 85 mmHg at about 680 mmHg, above the highest plausible site's pressure and
    # below sea level: the range is that pressure to sea level.
    found = gas(m(Q.ARTERIAL_PO2, 90.0), m(Q.ARTERIAL_PCO2, 40.0), m(Q.FIO2, 0.21))
    assert found.facts["barometric_pressure_assumed"] is True
    ph2o = found.facts["water_vapour_pressure"]
    assert isinstance(ph2o, float)
    expected = (90.0 - TOLERANCE + 40.0 * (0.21 + 0.79 / R)) / 0.21 + ph2o
    assert 650.0 < expected < 700.0
    pressure = u._pressure_range(found, TOLERANCE, Settings(), "mm[Hg]")
    assert pressure is not None
    (low,) = pressure.ends
    assert low == pytest.approx(expected, abs=0.5)  # shown to 1 mmHg
