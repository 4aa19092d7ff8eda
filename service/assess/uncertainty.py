"""Inputs known only as a range, and the scenarios that bound what they allow.

The assessment never fills in an unknown input silently. Where an input is estimated or not
sent, it is taken as a range — FiO2 from a device's published range or, when not sent, room
air to pure oxygen; barometric pressure, when neither pressure nor altitude came, from sea
level up to the highest plausible site (a setting); age, without a birth date, over the adult
range (a setting); residence at altitude, resident or visitor — and the rule set is evaluated
at each combination of the ends (``service.engine.scenarios`` keeps what holds in all).

The data narrow the ranges first: an arterial PO2 cannot exceed the alveolar PO2, so the FiO2
was at least the value at which the alveolar gas equation reaches the PaO2 (less the rule
set's tolerance), and the pressure at least the pressure at which it does.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

from service.config import Settings
from service.engine.facts import FactValue
from service.engine.ruleset import Discriminator
from service.engine.scenarios import Uncertainty
from service.engine.vocabulary import Mechanism
from service.exceptions import PhysiologyError
from service.physiology import constants as c
from service.physiology import reference as ref
from service.physiology.atmosphere import barometric_pressure_west_mmhg
from service.physiology.gas_exchange import lowest_barometric_for_pao2, lowest_fio2_for_pao2
from service.physiology.units import FIO2_LIMITS

from .derive import GasFacts
from .normals import SAME_PACO2_MMHG
from .presentation import PressureUnit, pressure_text

__all__ = ["Ranges", "input_ranges", "representative_changes"]

SETTLE_FIO2 = Discriminator(
    "A measured FiO2 (or the oxygen set on a device with a known FiO2, such as a Venturi mask "
    "or a ventilator) settles it.",
    ("fio2",),
)
# The pressure assumed at sea level is stated (``pb-assumed-sea-level``) and used for every
# number; what it cannot settle is the share of a low inspired PO2, which stays open.
PRESSURE_BEARS_ON = frozenset({Mechanism.LOW_INSPIRED_OXYGEN})
SETTLE_PRESSURE = Discriminator(
    "A measured barometric pressure, or the altitude of the site, settles it.",
    ("barometric_pressure", "altitude"),
)
SETTLE_AGE = Discriminator("The patient's birth date settles it.", ("age",))
SETTLE_RESIDENCE = Discriminator(
    "Whether the patient lives at this altitude (resident) or has come from lower down "
    "(visitor) settles it.",
    ("altitude_residence",),
)


@dataclass(frozen=True, slots=True)
class _Range:
    fact: str
    ends: tuple[FactValue, ...]
    label: str
    uncertainty: Uncertainty
    nominal: FactValue | None = None
    """The value the representative evaluation uses (None: the input is missing there)."""
    pressure_unit: PressureUnit | None = None
    """For a pressure: the unit its label shows the value in."""

    def labelled(self, value: FactValue) -> str:
        if isinstance(value, str):
            return value
        if self.pressure_unit is not None and isinstance(value, float):
            return f"{self.label} {pressure_text(value, self.pressure_unit, 0)}"
        return f"{self.label} {value:.3g}"


@dataclass(frozen=True, slots=True)
class Ranges:
    """The uncertain inputs of one gas: what the representative evaluation uses, the
    scenarios (each a set of changed facts with a label), and the uncertainties in words."""

    representative: dict[str, FactValue]
    scenarios: tuple[tuple[str, dict[str, FactValue], frozenset[Mechanism] | None], ...]
    """(label, changed facts, the mechanisms it bears on — None for all)."""
    uncertainties: tuple[Uncertainty, ...]
    representative_counts: bool
    """Whether every uncertain input has a value in the representative evaluation."""


def _number(gas: GasFacts, name: str) -> float | None:
    value = gas.facts.get(name)
    return value if isinstance(value, float) else None


def _lowest_fio2(gas: GasFacts, tolerance: float, quotient: float) -> float | None:
    pao2, paco2 = _number(gas, "arterial_po2"), _number(gas, "arterial_pco2")
    pb, ph2o = _number(gas, "barometric_pressure"), _number(gas, "water_vapour_pressure")
    if None in (pao2, paco2, pb, ph2o):
        return None
    assert pao2 is not None and paco2 is not None and pb is not None and ph2o is not None
    try:
        return lowest_fio2_for_pao2(
            arterial_po2_mmhg=pao2,
            paco2_mmhg=paco2,
            barometric_mmhg=pb,
            water_vapour_mmhg=ph2o,
            respiratory_quotient=quotient,
            tolerance_mmhg=tolerance,
        )
    except PhysiologyError:
        return None


def _lowest_pressure(gas: GasFacts, fio2: float, tolerance: float, quotient: float) -> float | None:
    pao2, paco2 = _number(gas, "arterial_po2"), _number(gas, "arterial_pco2")
    ph2o = _number(gas, "water_vapour_pressure")
    if None in (pao2, paco2, ph2o):
        return None
    assert pao2 is not None and paco2 is not None and ph2o is not None
    try:
        return lowest_barometric_for_pao2(
            arterial_po2_mmhg=pao2,
            paco2_mmhg=paco2,
            fio2=fio2,
            water_vapour_mmhg=ph2o,
            respiratory_quotient=quotient,
            tolerance_mmhg=tolerance,
        )
    except PhysiologyError:
        return None


def _fio2_range(
    gas: GasFacts, tolerance: float, settings: Settings
) -> tuple[_Range | None, dict[str, FactValue]]:
    """The FiO2 range (None when FiO2 is measured or set) and the representative's changes."""
    nominal = _number(gas, "fio2")
    lowest = _lowest_fio2(gas, tolerance, settings.respiratory_quotient)
    if nominal is not None and gas.fio2_range is not None:
        low, high = gas.fio2_range
        if low >= high:
            return None, {}
        changes: dict[str, FactValue] = {}
        if lowest is not None and low < lowest <= high:
            low = lowest
            changes["fio2_lowest_possible"] = lowest
            changes["fio2_raised_by_pao2"] = True
            if nominal < lowest:
                changes["fio2"] = lowest
        what = f"FiO2 (estimated from the device: {low:.2f} to {high:.2f})"
        shown = float(changes.get("fio2", nominal))
        fio2_range = _Range("fio2", (low, high), "FiO2", Uncertainty(what, SETTLE_FIO2), shown)
        return fio2_range, changes
    if nominal is not None:
        return None, {}
    low, high = c.ROOM_AIR_FIO2, FIO2_LIMITS[1]
    if lowest is not None and low < lowest <= high:
        low = lowest
    what = f"FiO2 (not sent: {low:.2f} to {high:.2f} considered)"
    return _Range("fio2", (low, high), "FiO2", Uncertainty(what, SETTLE_FIO2)), {}


def _pressure_range(
    gas: GasFacts, tolerance: float, settings: Settings, unit: PressureUnit
) -> _Range | None:
    if gas.facts.get("barometric_pressure_assumed") is not True:
        return None
    high = c.SEA_LEVEL_PRESSURE_MMHG
    low = barometric_pressure_west_mmhg(altitude_m=settings.unknown_site_altitude_m)
    fio2 = _number(gas, "fio2")
    if fio2 is not None:
        lowest = _lowest_pressure(gas, fio2, tolerance, settings.respiratory_quotient)
        if lowest is not None and lowest > low:
            low = min(lowest, high)
    if low >= high:
        return None  # the PaO2 itself says sea level (or higher pressure)
    what = (
        f"the barometric pressure (not sent: {pressure_text(low, unit, 0)} to "
        f"{pressure_text(high, unit, 0)}, sea level up to "
        f"{settings.unknown_site_altitude_m:.0f} m, considered)"
    )
    return _Range(
        "barometric_pressure",
        (low,),
        "PB",
        Uncertainty(what, SETTLE_PRESSURE, PRESSURE_BEARS_ON),
        nominal=high,
        pressure_unit=unit,
    )


def _age_range(gas: GasFacts, settings: Settings) -> _Range | None:
    if "age" in gas.facts:
        return None
    low, high = settings.unknown_age_years
    what = f"the age (no birth date: {low:.0f} to {high:.0f} years considered)"
    return _Range("age", (low, high), "age", Uncertainty(what, SETTLE_AGE))


def _residence_range(pressures: tuple[float, ...], gas: GasFacts) -> _Range | None:
    if "altitude_residence" in gas.facts or "arterial_pco2" not in gas.facts:
        return None
    differs = any(
        abs(
            ref.expected_paco2(
                barometric_mmhg=pb, residence=ref.Residence.RESIDENT
            ).upper_limit_mmhg
            - ref.expected_paco2(
                barometric_mmhg=pb, residence=ref.Residence.VISITOR
            ).upper_limit_mmhg
        )
        >= SAME_PACO2_MMHG
        for pb in pressures
    )
    if not differs:
        return None
    what = "whether the patient lives at this altitude (not sent: resident and visitor considered)"
    return _Range(
        "altitude_residence",
        tuple(r.value for r in ref.Residence),
        "",
        Uncertainty(what, SETTLE_RESIDENCE),
    )


def _combinations(ranges: list[_Range]) -> list[tuple[str, dict[str, FactValue]]]:
    out = []
    for ends in itertools.product(*(r.ends for r in ranges)):
        changes = {r.fact: value for r, value in zip(ranges, ends, strict=True)}
        label = ", ".join(r.labelled(value) for r, value in zip(ranges, ends, strict=True))
        out.append((label, changes))
    return out


def representative_changes(
    gas: GasFacts, *, tolerance_mmhg: float, settings: Settings
) -> dict[str, FactValue]:
    """``input_ranges(gas, ...).representative`` without the rest of the ranges: the changes
    the representative evaluation makes (only the FiO2's range makes any), for a caller that
    needs no scenario."""
    return _fio2_range(gas, tolerance_mmhg, settings)[1]


def input_ranges(
    gas: GasFacts,
    *,
    tolerance_mmhg: float,
    settings: Settings,
    pressure_unit: PressureUnit = "mm[Hg]",
) -> Ranges:
    """The uncertain inputs of ``gas`` and the scenarios at the ends of their ranges.

    ``tolerance_mmhg`` is how far a PaO2 may exceed the alveolar PO2 before the data are
    doubted (the rule set's parameter), used to narrow the ranges. The assumed pressure varies
    only in the scenarios that bear on a low inspired PO2; its words show it in
    ``pressure_unit``.
    """
    general: list[_Range] = []
    fio2, representative = _fio2_range(gas, tolerance_mmhg, settings)
    if fio2 is not None:
        general.append(fio2)
    age = _age_range(gas, settings)
    if age is not None:
        general.append(age)
    pb = _number(gas, "barometric_pressure")
    residence = _residence_range((pb,) if pb is not None else (), gas)
    if residence is not None:
        general.append(residence)
    pressure = _pressure_range(gas, tolerance_mmhg, settings, pressure_unit)
    fixed: dict[str, FactValue] = {
        name: representative[name]
        for name in ("fio2_lowest_possible", "fio2_raised_by_pao2")
        if name in representative
    }
    scenarios: list[tuple[str, dict[str, FactValue], frozenset[Mechanism] | None]] = []
    if general:
        scenarios += [(label, {**c, **fixed}, None) for label, c in _combinations(general)]
    if pressure is not None:
        # At the assumed pressure's low end the residence may matter even when it did not at
        # sea level.
        at_low = residence or _residence_range(tuple(float(v) for v in pressure.ends), gas)
        with_pressure = [r for r in general if r is not residence]
        with_pressure += [*([at_low] if at_low is not None else []), pressure]
        scenarios += [
            (label, {**c, **fixed}, PRESSURE_BEARS_ON) for label, c in _combinations(with_pressure)
        ]
    uncertainties = tuple(r.uncertainty for r in (*general, *([pressure] if pressure else [])))
    counts = all(r.nominal is not None for r in general)
    return Ranges(representative, tuple(scenarios), uncertainties, counts)
