"""Saturated water vapour pressure at body temperature.

Inspired gas is saturated with water at body temperature by the time it reaches the alveoli,
so PH2O depends on temperature only — never on barometric pressure (47 mmHg at 37 °C on a
mountain top as at sea level).
"""

from __future__ import annotations

import math

from service.physiology import constants as c
from service.physiology.bounds import BODY_TEMPERATURE_CEL, require_possible

# IAPWS-IF97 saturation-pressure equation (region 4), coefficients n1..n10.
_N = (
    0.11670521452767e4,
    -0.72421316703206e6,
    -0.17073846940092e2,
    0.12020824702470e5,
    -0.32325550322333e7,
    0.14915108613530e2,
    -0.48232657361591e4,
    0.40511340542057e6,
    -0.23855557567849,
    0.65017534844798e3,
)


def water_vapour_pressure_mmhg(*, temperature_cel: float) -> float:
    """Saturation vapour pressure of water (mm[Hg]) at body temperature.

    IAPWS-IF97 saturation-pressure equation (IAPWS R7-97(2012), eq. 30): with
    θ = T + n9 / (T − n10), A = θ² + n1 θ + n2, B = n3 θ² + n4 θ + n5, C = n6 θ² + n7 θ + n8,

        ps = [ 2C / (−B + √(B² − 4AC)) ]⁴  MPa

    Gives 47.12 mmHg at 37 °C (the textbook rounds to 47).

    Raises:
        ImpossibleValueError: body temperature outside 15–45 °C.
    """
    require_possible("temperature_cel", temperature_cel, *BODY_TEMPERATURE_CEL, "Cel")
    n1, n2, n3, n4, n5, n6, n7, n8, n9, n10 = _N
    t = temperature_cel + 273.15
    theta = t + n9 / (t - n10)
    a = theta**2 + n1 * theta + n2
    b = n3 * theta**2 + n4 * theta + n5
    cc = n6 * theta**2 + n7 * theta + n8
    p_mpa = (2.0 * cc / (-b + math.sqrt(b**2 - 4.0 * a * cc))) ** 4
    return p_mpa * 1.0e6 / c.PA_PER_MMHG
