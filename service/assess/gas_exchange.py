"""Derived facts of gas exchange: water vapour, inspired and alveolar PO2, the A-a gradient
and the oxygenation ratios (their normal values: ``normals``). Every number comes from
``service.physiology``; the method texts are built from the same constants."""

from __future__ import annotations

from functools import lru_cache

from service.config import Settings
from service.physiology import constants as c
from service.physiology import gas_exchange as gx
from service.physiology.bounds import PARTIAL_PRESSURE_MMHG
from service.physiology.water_vapour import water_vapour_pressure_mmhg

from .derivation import Computed, DerivedTable

table = DerivedTable()
MMHG = "mm[Hg]"
_PRESSURE = PARTIAL_PRESSURE_MMHG
_DIFFERENCE = (-PARTIAL_PRESSURE_MMHG[1], PARTIAL_PRESSURE_MMHG[1])


@table.quantity(
    "water_vapour_pressure",
    MMHG,
    (0.0, 100.0),
    1,
    "Saturated water vapour pressure at 37 Cel",
    result="water-vapour-pressure",
)
def water_vapour_pressure() -> Computed:
    return _WATER_VAPOUR


def _water_vapour() -> Computed:
    # One convention for every number: the analyser reports PaO2 and PaCO2 at 37 Cel, and the
    # reference values (Cerveri 1995) were measured so; the alveolar gas equation takes the
    # water vapour pressure at the same temperature. Body temperature is not applied.
    at = c.NORMAL_BODY_TEMPERATURE_CEL
    return Computed(
        water_vapour_pressure_mmhg(temperature_cel=at),
        f"IAPWS-IF97 saturation pressure at {at:g} Cel, the temperature the analyser reports "
        "PaO2 and PaCO2 at",
    )


# It takes no input: worked out once at import (a frozen Struct, shared by every gas).
_WATER_VAPOUR = _water_vapour()


@table.quantity("inspired_po2", MMHG, _PRESSURE, 1, "Inspired PO2", result="inspired-po2")
def inspired_po2(
    *, fio2: float, barometric_pressure: float, water_vapour_pressure: float
) -> Computed:
    return Computed(
        gx.inspired_po2_mmhg(
            fio2=fio2, barometric_mmhg=barometric_pressure, water_vapour_mmhg=water_vapour_pressure
        ),
        "PIO2 = FiO2 × (PB − PH2O)",
    )


@table.quantity(
    "sea_level_inspired_po2", MMHG, _PRESSURE, 1, "Inspired PO2 of room air at sea level"
)
def sea_level_inspired_po2(*, water_vapour_pressure: float) -> float:
    return gx.inspired_po2_mmhg(
        fio2=c.ROOM_AIR_FIO2,
        barometric_mmhg=c.SEA_LEVEL_PRESSURE_MMHG,
        water_vapour_mmhg=water_vapour_pressure,
    )


@table.quantity(
    "alveolar_po2",
    MMHG,
    _PRESSURE,
    1,
    "Alveolar PO2 (alveolar gas equation)",
    result="alveolar-po2",
)
def alveolar_po2(
    *,
    fio2: float,
    barometric_pressure: float,
    arterial_pco2: float,
    water_vapour_pressure: float,
    settings: Settings,
) -> Computed:
    quotient = settings.respiratory_quotient
    return Computed(
        gx.alveolar_po2_mmhg(
            fio2=fio2,
            paco2_mmhg=arterial_pco2,
            barometric_mmhg=barometric_pressure,
            water_vapour_mmhg=water_vapour_pressure,
            respiratory_quotient=quotient,
        ),
        _alveolar_method(quotient),
    )


@lru_cache(maxsize=16)
def _alveolar_method(quotient: float) -> str:
    # Depends only on R (a setting): written once, not on every call.
    return (
        "alveolar gas equation, full form: PAO2 = FiO2 (PB − PH2O) − PaCO2 "
        f"[FiO2 + (1 − FiO2)/R], R = {quotient:g}"
    )


@table.quantity("pf_ratio", MMHG, (0.0, 2000.0), 0, "PaO2 / FiO2", result="pf-ratio")
def pf_ratio(*, arterial_po2: float, fio2: float) -> Computed:
    return Computed(gx.pf_ratio_mmhg(arterial_po2_mmhg=arterial_po2, fio2=fio2), "PaO2 / FiO2")


@table.quantity(
    "aa_gradient",
    MMHG,
    _DIFFERENCE,
    1,
    "Alveolar-arterial PO2 difference",
    result="aa-gradient",
)
def aa_gradient(*, alveolar_po2: float, arterial_po2: float) -> Computed:
    return Computed(
        gx.aa_gradient_mmhg(alveolar_po2_mmhg=alveolar_po2, arterial_po2_mmhg=arterial_po2),
        "A-a = PAO2 − PaO2",
    )


@table.quantity("arterial_alveolar_excess", MMHG, _DIFFERENCE, 1, "Arterial minus alveolar PO2")
def arterial_alveolar_excess(*, arterial_po2: float, alveolar_po2: float) -> float:
    return arterial_po2 - alveolar_po2


@table.quantity(
    "a_a_ratio", "1", (0.0, 5.0), 2, "Arterial to alveolar PO2 ratio", result="a-a-ratio"
)
def a_a_ratio(*, arterial_po2: float, alveolar_po2: float) -> Computed | None:
    if alveolar_po2 <= 0.0:
        return None  # no ratio to a zero alveolar PO2 (the alveolar_po2 range allows 0)
    return Computed(
        gx.arterial_alveolar_ratio(arterial_po2_mmhg=arterial_po2, alveolar_po2_mmhg=alveolar_po2),
        "a/A = PaO2 / PAO2",
    )


FACTS = tuple(table.facts)
