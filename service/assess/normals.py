"""Derived facts that compare a gas with a healthy person's: PaO2 for age, the normal A-a
gradient at this alveolar PO2, PaCO2 for the altitude, and what room air would give.

The references are ``service.physiology.reference``'s (Cerveri 1995; the healthy-lung model
anchored on room air and 100 % oxygen; resident and visitor PaCO2 by altitude); the method
texts name them. Residence at altitude is a code fact (``altitude_residence``): where it is
not known and it matters, the assessment evaluates both (``service.assess.uncertainty``).
"""

from __future__ import annotations

from functools import lru_cache

from service.config import Settings
from service.exceptions import PhysiologyError
from service.physiology import constants as c
from service.physiology import reference as ref
from service.physiology.bounds import PARTIAL_PRESSURE_MMHG
from service.physiology.gas_exchange import alveolar_po2_mmhg
from service.physiology.oxygen_affinity import oxygen_affinity
from service.physiology.oxygen_exchange import HAEMOGLOBIN_SENSITIVITY_G_DL, exchange_conditions
from service.physiology.oxygen_projection import project_gas

from .derivation import Computed, DerivedTable

table = DerivedTable()
MMHG = "mm[Hg]"
_PRESSURE = PARTIAL_PRESSURE_MMHG
_DIFFERENCE = (-PARTIAL_PRESSURE_MMHG[1], PARTIAL_PRESSURE_MMHG[1])
# Residents' and visitors' upper limits closer than this (below the 1 mmHg an analyser reports
# to) make the residence immaterial: near sea level it is not asked.
SAME_PACO2_MMHG = 1.0


@table.quantity(
    "pao2_expected",
    MMHG,
    _PRESSURE,
    1,
    "PaO2 expected for age at sea level on room air (healthy reference)",
    result="pao2-expected",
)
def pao2_expected(*, age: float) -> Computed:
    value = ref.expected_pao2_mmhg(age_years=age)
    return Computed(value, _EXPECTED_METHODS[ref.reference_method(age)])


# The reference's method texts: one per age band (``reference_method``), each written once
# here rather than on every call.
_BAND_AGES = (
    0.0,
    ref.ADULT_REFERENCE_FROM_YEARS,
    ref.CERVERI_STUDIED_FROM_YEARS,
    ref.CERVERI_ELDERLY_FROM_YEARS,
)
_EXPECTED_METHODS = {
    ref.reference_method(a): f"{ref.reference_method(a)}, PaCO2 40, BMI {ref.REFERENCE_BMI_KG_M2:g}"
    for a in _BAND_AGES
}
_LOWER_LIMIT_METHODS = {
    ref.reference_method(a): f"{ref.reference_method(a)}: 5th centile" for a in _BAND_AGES
}


@table.quantity(
    "pao2_lower_limit",
    MMHG,
    _PRESSURE,
    1,
    "Lower limit of normal PaO2 for age at sea level on room air (5th centile)",
    result="pao2-lower-limit",
)
def pao2_lower_limit(*, age: float) -> Computed:
    value = ref.pao2_lower_limit_mmhg(age_years=age)
    return Computed(value, _LOWER_LIMIT_METHODS[ref.reference_method(age)])


@table.quantity(
    "pao2_above_lower_limit",
    MMHG,
    _DIFFERENCE,
    1,
    "PaO2 minus its lower limit for age (negative: below it)",
)
def pao2_above_lower_limit(*, arterial_po2: float, pao2_lower_limit: float) -> float:
    return arterial_po2 - pao2_lower_limit


@table.quantity(
    "paco2_expected",
    MMHG,
    _PRESSURE,
    1,
    "PaCO2 of healthy people at this barometric pressure (and residence)",
)
def paco2_expected(
    *, barometric_pressure: float, altitude_residence: str | None = None
) -> Computed | None:
    found = _expected_paco2(barometric_pressure, altitude_residence)
    return None if found is None else Computed(found.mean_mmhg, found.method)


@table.quantity(
    "paco2_upper_limit",
    MMHG,
    _PRESSURE,
    1,
    "Upper limit of PaCO2 of healthy people at this barometric pressure (and residence)",
    result="paco2-upper-limit",
)
def paco2_upper_limit(
    *, barometric_pressure: float, altitude_residence: str | None = None
) -> Computed | None:
    found = _expected_paco2(barometric_pressure, altitude_residence)
    return None if found is None else Computed(found.upper_limit_mmhg, found.method)


@lru_cache(maxsize=64)
def _expected_paco2(pb: float, residence: str | None) -> ref.ExpectedPaCO2 | None:
    """The PaCO2 of healthy people at ``pb`` for the residence, None when it depends on an
    unknown residence. Both PaCO2 facts read it, with the same arguments (cached, like
    ``_projections``: each scenario derives them again)."""
    if residence is not None:
        return ref.expected_paco2(barometric_mmhg=pb, residence=ref.Residence(residence))
    resident, visitor = (ref.expected_paco2(barometric_mmhg=pb, residence=r) for r in ref.Residence)
    if abs(resident.upper_limit_mmhg - visitor.upper_limit_mmhg) >= SAME_PACO2_MMHG:
        return None  # it depends on the residence: the assessment tries both
    return resident


@table.quantity(
    "paco2_above_limit",
    MMHG,
    _DIFFERENCE,
    1,
    "PaCO2 minus the upper limit for the setting (positive: hypercapnia)",
)
def paco2_above_limit(*, arterial_pco2: float, paco2_upper_limit: float) -> float:
    return arterial_pco2 - paco2_upper_limit


@table.quantity(
    "aa_gradient_expected",
    MMHG,
    (0.0, _PRESSURE[1]),
    1,
    "A-a gradient of a healthy person of this age at this alveolar PO2",
)
def aa_gradient_expected(*, age: float, alveolar_po2: float, settings: Settings) -> float:
    return ref.normal_aa_gradient_mmhg(
        age_years=age,
        alveolar_po2_mmhg=alveolar_po2,
        respiratory_quotient=settings.respiratory_quotient,
        limit=False,
    )


@table.quantity(
    "aa_gradient_upper_limit",
    MMHG,
    (0.0, _PRESSURE[1]),
    1,
    "Upper limit of the A-a gradient for age at this alveolar PO2",
    result="aa-gradient-upper-limit",
)
def aa_gradient_upper_limit(*, age: float, alveolar_po2: float, settings: Settings) -> Computed:
    return Computed(
        ref.normal_aa_gradient_mmhg(
            age_years=age,
            alveolar_po2_mmhg=alveolar_po2,
            respiratory_quotient=settings.respiratory_quotient,
            limit=True,
        ),
        "healthy lung for age (Cerveri 1995 on air; healthy men on 100 % oxygen, Upsala J Med "
        "Sci) at this alveolar PO2",
    )


@table.quantity(
    "aa_gradient_excess",
    MMHG,
    (_DIFFERENCE[0] - 100.0, _DIFFERENCE[1]),
    1,
    "A-a gradient minus its upper limit for age at this alveolar PO2",
)
def aa_gradient_excess(*, aa_gradient: float, aa_gradient_upper_limit: float) -> float:
    return aa_gradient - aa_gradient_upper_limit


@table.quantity(
    "a_a_ratio_lower_limit",
    "1",
    (0.0, 1.0),
    2,
    "Lower limit of the a/A ratio for age at this alveolar PO2",
)
def a_a_ratio_lower_limit(*, alveolar_po2: float, aa_gradient_upper_limit: float) -> float | None:
    if alveolar_po2 <= 0.0:
        return None
    return max(1.0 - aa_gradient_upper_limit / alveolar_po2, 0.0)


@table.quantity(
    "room_air_alveolar_po2",
    MMHG,
    _PRESSURE,
    1,
    "Alveolar PO2 this PaCO2 would give on room air at this pressure",
    result="room-air-alveolar-po2",
)
def room_air_alveolar_po2(
    *,
    barometric_pressure: float,
    arterial_pco2: float,
    water_vapour_pressure: float,
    settings: Settings,
) -> Computed | None:
    value = alveolar_po2_mmhg(
        fio2=c.ROOM_AIR_FIO2,
        paco2_mmhg=arterial_pco2,
        barometric_mmhg=barometric_pressure,
        water_vapour_mmhg=water_vapour_pressure,
        respiratory_quotient=settings.respiratory_quotient,
    )
    if value <= 0.0:
        return None
    return Computed(value, "alveolar gas equation on room air (FiO2 0.21), this PB and PaCO2")


@lru_cache(maxsize=512)
def _projections(
    arterial_po2: float,
    fio2: float,
    arterial_pco2: float,
    barometric_pressure: float,
    water_vapour_pressure: float,
    haemoglobin: float | None,
    arterial_ph: float | None,
    hufner_ml_per_g: float,
    respiratory_quotient: float,
    av_difference_ml_dl: float,
) -> tuple[float, float, float] | None:
    """(the projection at the measured or assumed Hb, the least and the most over an assumed
    Hb's range), or None when the model has no answer (an alveolar PO2 at or below zero, no
    steady state). The three facts share it (cached: each scenario of an assessment derives
    them again). The assumed a-v difference does not move the projection (``project_gas``),
    so it is not varied."""
    if fio2 == c.ROOM_AIR_FIO2:
        return arterial_po2, arterial_po2, arterial_po2  # on room air it is the gas itself
    affinity = oxygen_affinity(ph=arterial_ph) if arterial_ph is not None else None
    hbs = (haemoglobin,) if haemoglobin is not None else (None, *HAEMOGLOBIN_SENSITIVITY_G_DL)
    values: list[float] = []
    for hb in hbs:
        conditions = exchange_conditions(
            barometric_mmhg=barometric_pressure,
            haemoglobin_g_dl=hb,
            av_difference_ml_dl=av_difference_ml_dl,
            hufner_ml_per_g=hufner_ml_per_g,
            respiratory_quotient=respiratory_quotient,
            water_vapour_mmhg=water_vapour_pressure,
        )
        try:
            projected = project_gas(
                arterial_po2_mmhg=arterial_po2,
                fio2=fio2,
                paco2_mmhg=arterial_pco2,
                target_fio2=c.ROOM_AIR_FIO2,
                conditions=conditions,
                affinity=affinity,
            )
        except PhysiologyError:
            if not values:
                return None
            continue
        values.append(projected.arterial_po2_mmhg)
    return values[0], min(values), max(values)


def _room_air_projections(
    arterial_po2: float,
    fio2: float,
    arterial_pco2: float,
    barometric_pressure: float,
    water_vapour_pressure: float,
    settings: Settings,
    haemoglobin: float | None,
    arterial_ph: float | None,
) -> tuple[float, list[float]] | None:
    found = _projections(
        arterial_po2,
        fio2,
        arterial_pco2,
        barometric_pressure,
        water_vapour_pressure,
        haemoglobin,
        arterial_ph,
        settings.hufner_ml_per_g,
        settings.respiratory_quotient,
        settings.assumed_av_difference_ml_dl,
    )
    if found is None:
        return None
    value, least, most = found
    return value, [least, most]


_ROOM_AIR_METHOD = (
    "this gas's effective shunt carried to FiO2 0.21 at the same PB and PaCO2 (shunt "
    "equation with a constant a-v content difference, Berggren 1942; one-parameter model, "
    "Karbing 2007): the most this lung would give on room air, less where low-V/Q units "
    "contribute; it does not depend on the assumed a-v difference"
)


def _room_air_method(measured_hb: bool, ph: bool) -> str:
    hb = "measured Hb" if measured_hb else "Hb 14 g/dL assumed"
    curve = ", the curve moved for the pH (Severinghaus 1979)" if ph else ""
    return f"{_ROOM_AIR_METHOD}; {hb}{curve}"


# The four method texts (Hb measured or assumed, a pH or none), written once at import.
_ROOM_AIR_METHODS = {
    (hb, ph): _room_air_method(hb, ph) for hb in (False, True) for ph in (False, True)
}


@table.quantity(
    "room_air_pao2",
    MMHG,
    _PRESSURE,
    1,
    "PaO2 this gas's effective shunt would give on room air (at most: less with low-V/Q units)",
    result="room-air-pao2",
)
def room_air_pao2(
    *,
    arterial_po2: float,
    fio2: float,
    arterial_pco2: float,
    barometric_pressure: float,
    water_vapour_pressure: float,
    settings: Settings,
    haemoglobin: float | None = None,
    arterial_ph: float | None = None,
) -> Computed | None:
    found = _room_air_projections(
        arterial_po2,
        fio2,
        arterial_pco2,
        barometric_pressure,
        water_vapour_pressure,
        settings,
        haemoglobin,
        arterial_ph,
    )
    if found is None:
        return None
    return Computed(found[0], _ROOM_AIR_METHODS[haemoglobin is not None, arterial_ph is not None])


@table.quantity(
    "room_air_pao2_least",
    MMHG,
    _PRESSURE,
    1,
    "The least room_air_pao2 over an assumed Hb (8-17 g/dL)",
    result="room-air-pao2-least",
)
def room_air_pao2_least(
    *,
    arterial_po2: float,
    fio2: float,
    arterial_pco2: float,
    barometric_pressure: float,
    water_vapour_pressure: float,
    settings: Settings,
    haemoglobin: float | None = None,
    arterial_ph: float | None = None,
) -> Computed | None:
    found = _room_air_projections(
        arterial_po2,
        fio2,
        arterial_pco2,
        barometric_pressure,
        water_vapour_pressure,
        settings,
        haemoglobin,
        arterial_ph,
    )
    if found is None:
        return None
    return Computed(min(found[1]), "room-air PaO2 by effective shunt, least over the assumptions")


@table.quantity(
    "room_air_pao2_most",
    MMHG,
    _PRESSURE,
    1,
    "The most room_air_pao2 over an assumed Hb (8-17 g/dL)",
    result="room-air-pao2-most",
)
def room_air_pao2_most(
    *,
    arterial_po2: float,
    fio2: float,
    arterial_pco2: float,
    barometric_pressure: float,
    water_vapour_pressure: float,
    settings: Settings,
    haemoglobin: float | None = None,
    arterial_ph: float | None = None,
) -> Computed | None:
    found = _room_air_projections(
        arterial_po2,
        fio2,
        arterial_pco2,
        barometric_pressure,
        water_vapour_pressure,
        settings,
        haemoglobin,
        arterial_ph,
    )
    if found is None:
        return None
    return Computed(max(found[1]), "room-air PaO2 by effective shunt, most over the assumptions")


FACTS = tuple(table.facts)
