"""Barometric pressure from altitude.

Two models: the ISO 2533 / ICAO standard atmosphere (a mid-latitude annual mean, used by
aviation) and West's 1996 model atmosphere, fitted to pressures measured on low-latitude
mountains where people actually live and climb. The ISA underestimates pressure at 8000–8848 m
by 6–7 %; West's model is the default for people, and the result always names the model used.
"""

from __future__ import annotations

import math
from enum import StrEnum

from service.physiology import constants as c
from service.physiology.bounds import ALTITUDE_M, require_in_model


class AltitudeModel(StrEnum):
    """Which published model turned an altitude into a barometric pressure."""

    WEST_1996 = "west-1996"
    ISO_2533 = "iso-2533"


# Lowest dry land (Dead Sea shore, about -430 m) to just above the highest summit (8849 m).
WEST_1996_RANGE_M = ALTITUDE_M
# The ISA troposphere (geopotential 0–11 km), extended below sea level as far as people live.
ISA_RANGE_M = (ALTITUDE_M[0], c.ISA_TROPOPAUSE_GEOPOTENTIAL_M)


def geopotential_altitude_m(*, geometric_altitude_m: float) -> float:
    """Geopotential altitude H = r₀ h / (r₀ + h), r₀ = 6 356 766 m (ISO 2533)."""
    return c.EARTH_RADIUS_M * geometric_altitude_m / (c.EARTH_RADIUS_M + geometric_altitude_m)


def barometric_pressure_isa_mmhg(*, altitude_m: float) -> float:
    """Barometric pressure (mm[Hg]) of the ISO 2533 / ICAO standard atmosphere.

    Troposphere barometric formula on geopotential altitude H:

        p = p₀ (1 − L H / T₀)^(g₀ / (R L))

    with p₀ = 101 325 Pa, T₀ = 288.15 K, L = 0.0065 K/m, g₀ = 9.80665 m/s², R = 287.05287 J/(kg K).
    Source: ISO 2533:1975, Standard Atmosphere; ``altitude_m`` is geometric height above sea level.

    Raises:
        OutsideModelRangeError: outside -500 to 11 000 m.
    """
    require_in_model("altitude_m", altitude_m, *ISA_RANGE_M, "m", "the ISA troposphere")
    h = geopotential_altitude_m(geometric_altitude_m=altitude_m)
    exponent = c.STANDARD_GRAVITY_M_S2 / (c.DRY_AIR_GAS_CONSTANT_J_KG_K * c.ISA_LAPSE_RATE_K_PER_M)
    ratio = 1.0 - c.ISA_LAPSE_RATE_K_PER_M * h / c.ISA_SEA_LEVEL_TEMPERATURE_K
    return c.ISA_SEA_LEVEL_PRESSURE_PA * math.pow(ratio, exponent) / c.PA_PER_MMHG


def barometric_pressure_west_mmhg(*, altitude_m: float) -> float:
    """Barometric pressure (mm[Hg]) from West's 1996 model atmosphere.

        PB = exp(6.63268 − 0.1112 h − 0.00149 h²),   h in km

    Source: West JB, "Prediction of barometric pressures at high altitudes with the use of model
    atmospheres", J Appl Physiol 1996;81:1850–1854. Reproduces the 253 mmHg measured on the
    Everest summit (West et al., J Appl Physiol 1983;54:1188) to within 0.5 mmHg.

    Raises:
        OutsideModelRangeError: outside -500 to 9 000 m.
    """
    require_in_model("altitude_m", altitude_m, *WEST_1996_RANGE_M, "m", "West's 1996 model")
    h_km = altitude_m / 1000.0
    return math.exp(c.WEST_1996_A - c.WEST_1996_B_PER_KM * h_km - c.WEST_1996_C_PER_KM2 * h_km**2)


def barometric_pressure_mmhg(
    *, altitude_m: float, model: AltitudeModel = AltitudeModel.WEST_1996
) -> float:
    """Barometric pressure (mm[Hg]) at ``altitude_m`` by the chosen model (West 1996 by default)."""
    if model is AltitudeModel.ISO_2533:
        return barometric_pressure_isa_mmhg(altitude_m=altitude_m)
    return barometric_pressure_west_mmhg(altitude_m=altitude_m)
