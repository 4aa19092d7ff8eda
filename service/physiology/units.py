"""Unit conversion, in one place.

The service computes in canonical units: pressures in mm[Hg], fractions (FiO2, saturations)
as numbers 0–1, haemoglobin in g/dL, temperature in Cel, altitude in m, flow in L/min.
Adapters call ``to_canonical`` once, at the edge; nothing past them converts again.

Factors are UCUM's (``constants.KPA_PER_MMHG`` = 0.1333220 kPa per mm[Hg]).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from enum import StrEnum

from service.exceptions import ImpossibleValueError, UnitError
from service.physiology import constants as c

# Thresholds, steps and ranges are compared at this many decimals: far below any decimal shown,
# far above the rests binary floating point leaves (0.405 - 0.40 is 0.0050000000000000044,
# 0.15 - 0.10 is 0.04999999999999999).
COMPARISON_DECIMALS = 9


def comparable(value: float) -> float:
    """``value`` rounded to ``COMPARISON_DECIMALS``, to be compared with a threshold or a step
    without floating-point traps."""
    return round(value, COMPARISON_DECIMALS)


def kpa_from_mmhg(mmhg: float) -> float:
    """Pressure in kPa from mm[Hg] (UCUM: 1 mm[Hg] = 0.1333220 kPa)."""
    return mmhg * c.KPA_PER_MMHG


def mmhg_from_kpa(kpa: float) -> float:
    """Pressure in mm[Hg] from kPa (UCUM: 1 kPa = 7.500638 mm[Hg])."""
    return kpa / c.KPA_PER_MMHG


def mmhg_from_cmh2o(cmh2o: float) -> float:
    """Pressure in mm[Hg] from cm[H2O] (UCUM: 1 cm[H2O] = 0.0980665 kPa)."""
    return cmh2o * c.KPA_PER_CMH2O / c.KPA_PER_MMHG


def fraction_from_percent(percent: float) -> float:
    """A fraction (0–1) from a percentage (0–100)."""
    return percent / 100.0


def percent_from_fraction(fraction: float) -> float:
    """A percentage (0–100) from a fraction (0–1)."""
    return fraction * 100.0


def to_fact_unit(value: float, fact_unit: str) -> float:
    """A canonical value in the unit the rule catalogue presents it in.

    The catalogue presents fractions (saturations, haemoglobin fractions, admixture) as
    percentages, unit ``%``; every other fact keeps its canonical unit.
    """
    return percent_from_fraction(value) if fact_unit == "%" else value


def from_fact_unit(value: float, fact_unit: str) -> float:
    """The canonical value of a fact presented in ``fact_unit`` (the reverse of the above)."""
    return fraction_from_percent(value) if fact_unit == "%" else value


def g_dl_from_g_l(g_l: float) -> float:
    """Mass concentration in g/dL from g/L."""
    return g_l / 10.0


def g_l_from_g_dl(g_dl: float) -> float:
    """Mass concentration in g/L from g/dL."""
    return g_dl * 10.0


def celsius_from_fahrenheit(fahrenheit: float) -> float:
    """Temperature in °C from °F: (F − 32) × 5/9."""
    return (fahrenheit - 32.0) * 5.0 / 9.0


def fahrenheit_from_celsius(celsius: float) -> float:
    """Temperature in °F from °C: C × 9/5 + 32."""
    return celsius * 9.0 / 5.0 + 32.0


class Dimension(StrEnum):
    """The kinds of quantity the service reads, each with one canonical UCUM unit."""

    PRESSURE = "mm[Hg]"
    AIRWAY_PRESSURE = "cm[H2O]"
    FRACTION = "1"
    HAEMOGLOBIN = "g/dL"
    TEMPERATURE = "Cel"
    SUBSTANCE_CONCENTRATION = "mmol/L"
    PH = "[pH]"
    FLOW = "L/min"
    LENGTH = "m"
    AGE = "a"
    RATE = "/min"
    PERCENT = "%"


def _same(value: float) -> float:
    return value


# UCUM code as sent -> converter to the canonical unit of each dimension. Codes are UCUM
# case-sensitive codes; a few common non-UCUM spellings seen in feeds are accepted because
# they are unambiguous ("mmHg", "meq/L", "degF").
_CONVERTERS: dict[Dimension, dict[str, Callable[[float], float]]] = {
    Dimension.PRESSURE: {
        "mm[Hg]": _same,
        "mmHg": _same,
        "kPa": mmhg_from_kpa,
        "cm[H2O]": mmhg_from_cmh2o,
        "hPa": lambda hpa: mmhg_from_kpa(hpa / 10.0),  # ambient pressure is often in hPa
        "mbar": lambda mbar: mmhg_from_kpa(mbar / 10.0),  # 1 mbar = 1 hPa = 0.1 kPa
    },
    Dimension.AIRWAY_PRESSURE: {
        "cm[H2O]": _same,
        "cmH2O": _same,
        "mbar": lambda mbar: mbar * 0.1 / c.KPA_PER_CMH2O,  # 1 mbar = 0.1 kPa
        "hPa": lambda hpa: hpa * 0.1 / c.KPA_PER_CMH2O,
    },
    Dimension.FRACTION: {"1": _same, "%": fraction_from_percent},
    Dimension.PERCENT: {"%": _same, "1": percent_from_fraction},
    Dimension.HAEMOGLOBIN: {"g/dL": _same, "g/L": g_dl_from_g_l},
    Dimension.TEMPERATURE: {
        "Cel": _same,
        "[degF]": celsius_from_fahrenheit,
        "degF": celsius_from_fahrenheit,
    },
    Dimension.SUBSTANCE_CONCENTRATION: {
        "mmol/L": _same,
        "meq/L": _same,  # monovalent ions: 1 meq = 1 mmol
        "mEq/L": _same,
    },
    Dimension.PH: {"[pH]": _same, "1": _same, "pH": _same},
    Dimension.FLOW: {"L/min": _same, "l/min": _same, "mL/min": lambda ml: ml / 1000.0},
    Dimension.LENGTH: {"m": _same, "km": lambda km: km * 1000.0, "[ft_i]": lambda ft: ft * 0.3048},
    Dimension.AGE: {"a": _same, "mo": lambda mo: mo / 12.0, "wk": lambda wk: wk * 7 / 365.25},
    Dimension.RATE: {"/min": _same, "{breaths}/min": _same},
}


# Every unit code the service converts, for any quantity: the only unit codes an error message
# may name, because they come from this table and not from the sender.
KNOWN_UNITS = frozenset(code for table in _CONVERTERS.values() for code in table)

# The spellings above that are not the UCUM code of what they mean (a UCUM parser refuses
# them, or, for pH, reads picohenry: tests/physiology/test_units.py), each with the UCUM code
# it means. Read only with a warning that says so.
NOT_UCUM: dict[str, str] = {
    "mmHg": "mm[Hg]",
    "cmH2O": "cm[H2O]",
    "degF": "[degF]",
    "mEq/L": "meq/L",
    "pH": "[pH]",
}


def unit_named(unit: str) -> str:
    """How a message names a unit that was sent: the code itself only when it is one of the
    service's own (``KNOWN_UNITS``), otherwise a description, so no message echoes the input."""
    return f"unit '{unit}'" if unit in KNOWN_UNITS else "the unit sent (not a code of this service)"


def accepted_units(dimension: Dimension) -> tuple[str, ...]:
    """The unit codes ``to_canonical`` accepts for a dimension."""
    return tuple(_CONVERTERS[dimension])


def to_canonical(value: float, unit: str, dimension: Dimension) -> float:
    """Convert ``value`` in ``unit`` to the canonical unit of ``dimension``.

    Raises:
        UnitError: the unit is not one of ``accepted_units(dimension)``.
    """
    try:
        convert = _CONVERTERS[dimension][unit]
    except KeyError:
        raise UnitError(
            unit, dimension.name.lower(), accepted_units(dimension), named=unit_named(unit)
        ) from None
    return convert(value)


@dataclass(frozen=True, slots=True)
class Fio2:
    """An FiO2 as a fraction, and whether the sender's unit had to be reinterpreted."""

    fraction: float
    reinterpreted: bool


FIO2_LIMITS = (0.10, 1.0)


def normalise_fio2(value: float, unit: str) -> Fio2:
    """FiO2 as a fraction from a value sent as ``%`` or ``1``.

    Real feeds mix the two (LOINC 3150-0 is a percentage, 71835-3 a fraction, and fractions are
    sent with unit ``%``): a value ≤ 1.0 sent as ``%`` is read as a fraction, a value > 1 sent
    as ``1`` as a percentage, and ``reinterpreted`` says so. The result must lie in 0.10–1.0.

    Raises:
        UnitError: the unit is neither ``%`` nor ``1``.
        ImpossibleValueError: the fraction is outside 0.10–1.0 after normalisation.
    """
    if unit not in ("%", "1"):
        raise UnitError(unit, "inspired oxygen fraction", ("%", "1"), named=unit_named(unit))
    as_percent = unit == "%"
    reinterpreted = False
    if as_percent and 0.0 < value <= 1.0:
        as_percent, reinterpreted = False, True
    elif not as_percent and value > 1.0:
        as_percent, reinterpreted = True, True
    fraction = fraction_from_percent(value) if as_percent else value
    low, high = FIO2_LIMITS
    if not low <= fraction <= high:
        raise ImpossibleValueError(
            "fio2",
            fraction,
            f"an inspired oxygen fraction must lie between {low:g} and {high:g} "
            f"(sent as {value:g} {unit})",
        )
    return Fio2(fraction=fraction, reinterpreted=reinterpreted)
