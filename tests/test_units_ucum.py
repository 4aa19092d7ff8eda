"""Every unit factor of ``service.physiology.units`` against an independent UCUM implementation.

The reference is ``ucumvert`` (a UCUM grammar and unit table on top of ``pint``), from the
package registry. Its mm[Hg] is the conventional 133.322387 Pa where UCUM's essence defines
m[Hg] = 133.3220 kPa exactly: the two differ by 3 ppm, so pressures are compared to 1e-5
relative (a slip such as 8,202 ft read as 2,750 m, or hPa taken as kPa, is off by far more).
Non-UCUM spellings the reader accepts are checked as the UCUM unit they stand for.
"""

from __future__ import annotations

import pytest
from ucumvert import PintUcumRegistry

from service.physiology import units as u
from service.physiology.units import Dimension

UREG = PintUcumRegistry()
# Spellings accepted beside UCUM (feeds send them) -> the UCUM unit they mean.
SPELLED = {
    "mmHg": "mm[Hg]",
    "cmH2O": "cm[H2O]",
    "degF": "[degF]",
    "l/min": "L/min",
    "mEq/L": "meq/L",
    "pH": "[pH]",
    "{breaths}/min": "/min",
}
# Units ucumvert does not convert (arbitrary or special units): checked by the identity only.
IDENTITY_ONLY = {"[pH]", "meq/L"}
PRESSURE_TOLERANCE = 1e-5


def _cases() -> list[tuple[Dimension, str]]:
    return [(d, unit) for d in Dimension for unit in u.accepted_units(d)]


def _reference(value: float, unit: str, canonical: str) -> float:
    quantity = UREG.Quantity(value, UREG.from_ucum(unit).units)
    return float(quantity.to(UREG.from_ucum(canonical).units).magnitude)


@pytest.mark.parametrize(("dimension", "unit"), _cases(), ids=lambda x: str(x))
def test_each_accepted_unit_converts_as_ucum_defines_it(dimension: Dimension, unit: str) -> None:
    ucum = SPELLED.get(unit, unit)
    canonical = dimension.value
    for value in (1.0, 37.5, 8202.0):
        ours = u.to_canonical(value, unit, dimension)
        if ucum in IDENTITY_ONLY or canonical in IDENTITY_ONLY or ucum == canonical:
            assert ours == value
            continue
        expected = _reference(value, ucum, canonical)
        assert ours == pytest.approx(expected, rel=PRESSURE_TOLERANCE), (unit, value)


def test_the_slips_the_issue_names_are_told_apart() -> None:
    # 8,202 ft is 2,500 m (ucumvert: [ft_i] = 0.3048 m), never 2,750 m.
    assert u.to_canonical(8202.0, "[ft_i]", Dimension.LENGTH) == pytest.approx(2500.0, abs=0.1)
    assert u.to_canonical(2.5, "km", Dimension.LENGTH) == 2500.0
    # 1013 hPa = 1013 mbar = 101.3 kPa = 759.8 mmHg (standard atmosphere, ISO 2533).
    for unit in ("hPa", "mbar"):
        assert u.to_canonical(1013.25, unit, Dimension.PRESSURE) == pytest.approx(760.0, abs=0.01)
    assert u.to_canonical(10.0, "mbar", Dimension.AIRWAY_PRESSURE) == pytest.approx(
        _reference(10.0, "mbar", "cm[H2O]"), rel=1e-9
    )


def test_pressure_constants_are_ucums() -> None:
    # UCUM essence: m[Hg] = 133.3220 kPa, m[H2O] = 9.80665 kPa.
    assert u.kpa_from_mmhg(1.0) == pytest.approx(0.1333220, rel=1e-12)
    assert u.mmhg_from_cmh2o(1.0) == pytest.approx(0.0980665 / 0.1333220, rel=1e-12)
    assert u.kpa_from_mmhg(1.0) == pytest.approx(
        _reference(1.0, "mm[Hg]", "kPa"), rel=PRESSURE_TOLERANCE
    )


def test_fact_units_present_fractions_as_percent() -> None:
    assert u.to_fact_unit(0.97, "%") == pytest.approx(_reference(0.97, "1", "%"))
    assert u.from_fact_unit(97.0, "%") == pytest.approx(_reference(97.0, "%", "1"))
    assert u.to_fact_unit(0.97, "1") == 0.97
    assert u.from_fact_unit(52.0, "mm[Hg]") == 52.0
