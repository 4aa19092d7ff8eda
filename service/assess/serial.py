"""The response to oxygen: two gases on different FiO2s, whichever came first.

True shunt is unaffected by FiO2, so the venous admixture stays the same as FiO2 changes;
low-V/Q units are corrected by oxygen, so it falls (Benatar SR, Hewlett AM, Nunn JF, Br J
Anaesth 1973;45:711). Every pair of arterial gases within the oxygen-response window of the
index gas is a candidate; the pair with the widest FiO2 step decides (the later pair on a tie).

Each gas's admixture is uncertain: its FiO2 may be a device estimate with a range, and the
a-v content difference is assumed unless a mixed-venous sample came. The facts therefore give,
beside the admixture at the nominal values, the least fall and the largest change over every
end of those ranges — both gases' FiO2 ends, and one a-v difference for both (the same patient
over a short time: Fick's principle ties them). Whether a change is large enough, and whether
a step of FiO2 can show a fixed shunt, are the rules' decisions.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from datetime import timedelta
from typing import TYPE_CHECKING

from service.config import Settings
from service.engine.facts import FactKind, FactOrigin, FactSpec
from service.exceptions import PhysiologyError
from service.physiology.gas_exchange import alveolar_po2_mmhg
from service.physiology.units import from_fact_unit

from .admixture import venous_admixture_fraction

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


# fmt: off
SERIAL_FACTS: tuple[FactSpec, ...] = (
    _serial("fio2_step", "1", (0, 1), 2, "Higher minus lower FiO2 of the two gases compared"),
    _serial("pao2_change", MMHG, (-1200, 1200), 1,
            "PaO2 on the higher FiO2 minus PaO2 on the lower"),
    _serial("admixture_at_lower_fio2", "%", (-100, 100), 0, "Venous admixture, lower-FiO2 gas"),
    _serial("admixture_at_higher_fio2", "%", (-100, 100), 0,
            "Venous admixture, higher-FiO2 gas"),
    _serial("admixture_fall_least", "%", (-200, 200), 1,
            "The least fall of admixture (lower- minus higher-FiO2 gas) over the uncertainty"),
    _serial("admixture_change_largest", "%", (0, 200), 1,
            "The largest change of admixture between the two gases over the uncertainty"),
    _serial("admixture_at_higher_fio2_least", "%", (-100, 100), 0,
            "The least venous admixture of the higher-FiO2 gas over the uncertainty"),
    _serial("admixture_at_higher_fio2_most", "%", (-100, 100), 0,
            "The most venous admixture of the higher-FiO2 gas over the uncertainty"),
)
# fmt: on


@dataclass(frozen=True, slots=True)
class _Gas:
    facts: GasFacts
    fio2: float
    fio2_ends: tuple[float, ...]


def _gas(facts: GasFacts) -> _Gas | None:
    fio2 = facts.number("fio2")
    if fio2 is None:
        return None
    ends = (fio2,) if facts.fio2_range is None else tuple(facts.fio2_range)
    return _Gas(facts, fio2, ends)


def _admixture(
    gas: GasFacts, fio2: float, av_difference: float, settings: Settings
) -> float | None:
    """The gas's venous admixture (a fraction) had its FiO2 been ``fio2``."""
    from .catalogue import DEFAULT_CATALOGUE  # the catalogue lists this module's facts

    f = gas.facts

    def canonical(name: str) -> float | None:
        value = f.get(name)
        unit = DEFAULT_CATALOGUE[name].unit or ""
        return from_fact_unit(value, unit) if isinstance(value, float) else None

    pao2, paco2, hb = (
        canonical("arterial_po2"),
        canonical("arterial_pco2"),
        canonical("haemoglobin"),
    )
    content, pb = canonical("arterial_o2_content"), canonical("barometric_pressure")
    ph2o = canonical("water_vapour_pressure")
    if None in (pao2, paco2, hb, content, pb, ph2o):
        return None
    assert pao2 is not None and paco2 is not None and hb is not None
    assert content is not None and pb is not None and ph2o is not None
    try:
        alveolar = alveolar_po2_mmhg(
            fio2=fio2,
            paco2_mmhg=paco2,
            barometric_mmhg=pb,
            water_vapour_mmhg=ph2o,
            respiratory_quotient=settings.respiratory_quotient,
        )
        return venous_admixture_fraction(
            haemoglobin=hb,
            arterial_po2=pao2,
            alveolar_po2=alveolar,
            arterial_o2_content=content,
            hufner_ml_per_g=settings.hufner_ml_per_g,
            av_difference=av_difference,
            arterial_so2=canonical("arterial_so2_functional"),
            carboxyhaemoglobin=canonical("carboxyhaemoglobin"),
            methaemoglobin=canonical("methaemoglobin"),
            mixed_venous_so2=canonical("mixed_venous_so2"),
            mixed_venous_po2=canonical("mixed_venous_po2"),
            arterial_ph=canonical("arterial_ph"),
        )
    except PhysiologyError:
        return None


def _pair(gases: list[_Gas]) -> tuple[_Gas, _Gas] | None:
    """The (lower-FiO2, higher-FiO2) pair with the widest step; the latest on a tie."""
    best: tuple[_Gas, _Gas] | None = None
    best_step = 0.0
    # Gases run latest first: a later pair keeps its place on a tie.
    for a, b in itertools.combinations(gases, 2):
        step = abs(a.fio2 - b.fio2)
        if step > best_step:
            best, best_step = ((a, b) if a.fio2 < b.fio2 else (b, a)), step
    return best


def serial_facts(gases: list[GasFacts], *, settings: Settings) -> dict[str, float]:
    """The response-to-oxygen facts of the gases (latest first, index first), or {} when no
    two gases within the window differ in FiO2."""
    index = gases[0]
    window = timedelta(hours=settings.oxygen_response_window_hours)
    anchor = index.gas.time
    near = [
        g
        for g in gases
        if anchor is None or g.gas.time is None or abs(anchor - g.gas.time) <= window
    ]
    usable = [found for g in near if (found := _gas(g)) is not None]
    pair = _pair(usable)
    if pair is None:
        return {}
    low, high = pair
    measured_venous = any(g.facts.facts.get("mixed_venous_so2") is not None for g in (low, high))
    nominal_avd = settings.assumed_av_difference_ml_dl
    differences = (nominal_avd,) if measured_venous else settings.av_difference_range_ml_dl
    facts: dict[str, float] = {"fio2_step": high.fio2 - low.fio2}
    low_pao2, high_pao2 = low.facts.number("arterial_po2"), high.facts.number("arterial_po2")
    if low_pao2 is not None and high_pao2 is not None:
        facts["pao2_change"] = high_pao2 - low_pao2
    at_low = _admixture(low.facts, low.fio2, nominal_avd, settings)
    at_high = _admixture(high.facts, high.fio2, nominal_avd, settings)
    if at_low is None or at_high is None:
        return facts
    facts["admixture_at_lower_fio2"] = 100.0 * at_low
    facts["admixture_at_higher_fio2"] = 100.0 * at_high
    falls: list[float] = []
    highs: list[float] = []
    for avd, f_low, f_high in itertools.product(differences, low.fio2_ends, high.fio2_ends):
        a = _admixture(low.facts, f_low, avd, settings)
        b = _admixture(high.facts, f_high, avd, settings)
        if a is None or b is None:
            return facts  # an end without a steady state: no robust conclusion
        falls.append(100.0 * (a - b))
        highs.append(100.0 * b)
    facts["admixture_fall_least"] = min(falls)
    facts["admixture_change_largest"] = max(abs(x) for x in falls)
    facts["admixture_at_higher_fio2_least"] = min(highs)
    facts["admixture_at_higher_fio2_most"] = max(highs)
    return facts
