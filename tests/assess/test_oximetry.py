"""Oximetry facts (service/assess/oximetry.py): the functional saturation from a co-oximeter's
fractional oxyhaemoglobin, and the DLCO against its lower limit of normal.

Functional SaO2 = O2Hb / (O2Hb + HHb) and fractional O2Hb = O2Hb / total Hb, so with COHb and
MetHb (which carry no oxygen) functional = fractional / (1 - COHb - MetHb) (CLSI C46-A2;
common practice). The arithmetic is done here by hand.
"""

from __future__ import annotations

import pytest

from service.assess import oximetry
from service.assess.derivation import DerivedFact

ENTRIES: dict[str, DerivedFact] = {entry.name: entry for entry in oximetry.FACTS}


@pytest.mark.parametrize(
    ("o2hb", "cohb", "methb", "functional"),
    [
        (0.85, 0.10, None, 0.85 / 0.90),
        (0.85, None, 0.05, 0.85 / 0.95),
        (0.80, 0.08, 0.04, 0.80 / 0.88),
        # No dyshaemoglobin measured: a fractional value cannot be turned into a functional one.
        (0.85, None, None, None),
        # Rounding of the three fractions can put the sum above one: saturated, not above.
        (0.97, 0.05, None, 1.0),
        # Every haemoglobin bound to CO or oxidised: none carries oxygen, nothing to say.
        (0.0, 0.6, 0.4, None),
    ],
)
def test_the_functional_saturation_from_a_fractional_oxyhaemoglobin(
    o2hb: float, cohb: float | None, methb: float | None, functional: float | None
) -> None:
    got = ENTRIES["arterial_so2_functional"].compute(
        arterial_o2hb=o2hb, carboxyhaemoglobin=cohb, methaemoglobin=methb
    )
    assert got == (None if functional is None else pytest.approx(functional, rel=1e-12))


def test_a_measured_functional_saturation_is_taken_as_it_is() -> None:
    got = ENTRIES["arterial_so2_functional"].compute(
        arterial_so2=0.93, arterial_o2hb=0.85, carboxyhaemoglobin=0.10
    )
    assert got == 0.93


@pytest.mark.parametrize(
    ("facts", "below"),
    [
        # Below the lower limit of normal (the 5th centile) is abnormal; at it, it is not.
        ({"dlco": 18.0, "dlco_lower_limit": 20.0}, True),
        ({"dlco": 20.0, "dlco_lower_limit": 20.0}, False),
        ({"dlco_percent_predicted": 60.0, "dlco_percent_lower_limit": 70.0}, True),
        ({"dlco_percent_predicted": 70.0, "dlco_percent_lower_limit": 70.0}, False),
        ({"dlco": 18.0}, None),
    ],
)
def test_the_dlco_below_its_lower_limit(facts: dict[str, float], below: bool | None) -> None:
    assert ENTRIES["dlco_below_lower_limit"].compute(**facts) is below
