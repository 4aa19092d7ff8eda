"""Serial comparison: the index gas against an earlier gas taken on a different FiO2.

The facts it adds (``SERIAL_FACTS``) describe the response to oxygen: the FiO2 step, the PaO2
change, and the venous admixture at the lower and higher FiO2. Whether the step is large
enough to judge is the rules' decision (parameter ``oxygen_step``).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from service.engine.facts import FactKind, FactOrigin, FactSpec
from service.intake.model import Quantity
from service.intake.plausibility import POSSIBLE_RANGE
from service.physiology.units import FIO2_LIMITS

from .admixture import SHUNT_LIMITS

if TYPE_CHECKING:  # derive imports the catalogue, which lists these facts
    from .derive import GasFacts

MMHG = "mm[Hg]"


def _serial(
    name: str, unit: str, limits: tuple[float, float], decimals: int, description: str
) -> FactSpec:
    return FactSpec(
        name,
        FactKind.QUANTITY,
        unit,
        description,
        *limits,
        decimals=decimals,
        origin=FactOrigin.SERIAL,
    )


def _difference(limits: tuple[float, float]) -> tuple[float, float]:
    """The possible range of a difference of two values that lie within ``limits``."""
    low, high = limits
    return low - high, high - low


# Each range follows from the range of the facts compared: one owner per limit.
_FIO2_CHANGE = _difference(FIO2_LIMITS)
_PAO2 = POSSIBLE_RANGE[Quantity.ARTERIAL_PO2]
# fmt: off
SERIAL_FACTS: tuple[FactSpec, ...] = (
    _serial("fio2_change", "1", _FIO2_CHANGE, 2, "FiO2 now minus FiO2 of the earlier gas"),
    _serial("fio2_step", "1", (0.0, _FIO2_CHANGE[1]), 2,
            "Higher minus lower FiO2 of the two gases"),
    _serial("pao2_change", MMHG, _difference(_PAO2), 1, "PaO2 now minus PaO2 of the earlier gas"),
    _serial("shunt_fraction_at_lower_fio2", "%", SHUNT_LIMITS, 0,
            "Shunt fraction, lower-FiO2 gas"),
    _serial("shunt_fraction_at_higher_fio2", "%", SHUNT_LIMITS, 0,
            "Shunt fraction, higher-FiO2 gas"),
    _serial("shunt_fraction_change", "%", _difference(SHUNT_LIMITS), 0,
            "Shunt fraction, higher minus lower FiO2"),
)
# fmt: on


def compared_gas(index: GasFacts, earlier: list[GasFacts]) -> GasFacts | None:
    """The earlier gas furthest from the index gas in FiO2 (the latest of those on a tie),
    or None when no earlier gas has a known FiO2 different from the index gas's."""
    fio2 = index.number("fio2")
    if fio2 is None:
        return None
    best: GasFacts | None = None
    best_step = 0.0
    for other in earlier:  # latest first: a later gas keeps its place on a tie
        other_fio2 = other.number("fio2")
        if other_fio2 is None or other_fio2 == fio2:
            continue
        step = abs(other_fio2 - fio2)
        if best is None or step > best_step:
            best, best_step = other, step
    return best


def add_serial_facts(index: GasFacts, earlier: list[GasFacts]) -> GasFacts | None:
    """Compare the index gas with ``compared_gas`` and add the serial facts to its facts.

    Adds ``fio2_change`` (index minus earlier), ``fio2_step`` (higher minus lower FiO2),
    ``pao2_change`` and the venous admixture at the lower and higher FiO2; returns the gas
    compared with, or None.
    """
    other = compared_gas(index, earlier)
    if other is None:
        return None
    fio2, other_fio2 = index.number("fio2"), other.number("fio2")
    assert fio2 is not None and other_fio2 is not None
    index.set_fact("fio2_change", fio2 - other_fio2)
    index.set_fact("fio2_step", abs(fio2 - other_fio2))
    # Every gas is anchored on its PaO2 (pairing.py), so both are known.
    pao2, other_pao2 = index.number("arterial_po2"), other.number("arterial_po2")
    assert pao2 is not None and other_pao2 is not None
    index.set_fact("pao2_change", pao2 - other_pao2)
    shunt, other_shunt = index.number("shunt_fraction"), other.number("shunt_fraction")
    if shunt is not None and other_shunt is not None:
        # compared_gas never returns a gas on the same FiO2.
        low, high = (other_shunt, shunt) if fio2 > other_fio2 else (shunt, other_shunt)
        index.set_fact("shunt_fraction_at_lower_fio2", low)
        index.set_fact("shunt_fraction_at_higher_fio2", high)
        index.set_fact("shunt_fraction_change", high - low)
    return other
