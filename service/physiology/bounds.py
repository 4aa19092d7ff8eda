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


# Limits of the possible, in canonical units, used by several modules and by the intake range
# table (service/intake/plausibility.py), which the rule catalogue reads: one owner for each
# limit. Each is wide on purpose: it exists to catch unit slips and transcription errors, not
# to judge a value as abnormal.
# Above the model pressure at 9,000 m (West 1996: about 230 mmHg; the altitude range ends
# there) and the Everest summit's measured 253 mmHg; below a 1.6 atm hyperbaric chamber.
PRESSURE_BAROMETRIC_MMHG = (200.0, 1200.0)
PARTIAL_PRESSURE_MMHG = (0.0, 1200.0)  # no gas partial pressure can exceed the total pressure
# PCO2 above 250 mmHg is not compatible with life at any pH the analysers report (common
# practice); 40 sent as kPa when mmHg was meant reads as 300 mmHg and is caught here.
CARBON_DIOXIDE_MMHG = (0.0, 250.0)
FRACTION = (0.0, 1.0)
HAEMOGLOBIN_G_DL = (1.0, 26.0)
BODY_TEMPERATURE_CEL = (15.0, 45.0)  # deep therapeutic hypothermia to extreme hyperpyrexia
AGE_YEARS = (0.0, 130.0)
PH = (6.3, 8.0)  # the analysers' measuring range; lowest pH survived is about 6.33 (from memory)
HYDROGEN_ION_NMOL_L = (1.0, 1000.0)  # pH 9 to 6: beyond any pH a blood sample can have
BICARBONATE_MMOL_L = (1.0, 80.0)
RESPIRATORY_QUOTIENT = (0.6, 1.2)  # whole-body RQ, fat (0.7) to net lipogenesis (about 1.2)
ALTITUDE_M = (-500.0, 9000.0)  # below the Dead Sea shore (-430 m) to above Everest (8,849 m)
