"""Input checks shared by the physiology functions.

Two kinds of limit, two errors: a value outside ``[low, high]`` of what is *possible* raises
``ImpossibleValueError``; a possible value outside an equation's *validated* range raises
``OutsideModelRangeError``. The limits themselves live with the function that needs them.
"""

from __future__ import annotations

import math

from service.exceptions import ImpossibleValueError, OutsideModelRangeError


def require_possible(name: str, value: float, low: float, high: float, unit: str) -> float:
    """Return ``value`` if finite and within ``[low, high]``, else raise ImpossibleValueError."""
    if not math.isfinite(value):
        raise ImpossibleValueError(name, value, "must be a finite number")
    if not low <= value <= high:
        raise ImpossibleValueError(
            name, value, f"impossible: must lie between {low:g} and {high:g} {unit}"
        )
    return value


def require_in_model(
    name: str, value: float, low: float, high: float, unit: str, model: str
) -> float:
    """Return ``value`` if ``model`` is valid there, else raise OutsideModelRangeError."""
    if not low <= value <= high:
        raise OutsideModelRangeError(
            name, value, f"{model} is valid only from {low:g} to {high:g} {unit}"
        )
    return value


# Limits of the possible, in canonical units, used by several modules. Each is wide on purpose:
# it exists to catch unit slips and transcription errors, not to judge a value as abnormal.
PRESSURE_BAROMETRIC_MMHG = (150.0, 1200.0)  # above the Everest summit's 253 mmHg; below 1.6 atm
PARTIAL_PRESSURE_MMHG = (0.0, 1200.0)  # no gas partial pressure can exceed the total pressure
FRACTION = (0.0, 1.0)
HAEMOGLOBIN_G_DL = (1.0, 26.0)
BODY_TEMPERATURE_CEL = (15.0, 45.0)  # deep therapeutic hypothermia to extreme hyperpyrexia
AGE_YEARS = (0.0, 130.0)
PH = (6.3, 8.0)
BICARBONATE_MMOL_L = (1.0, 80.0)
RESPIRATORY_QUOTIENT = (0.5, 1.5)
