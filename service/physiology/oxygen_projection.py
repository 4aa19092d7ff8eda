"""One gas carried to another FiO2 by its effective shunt: "what would the PaO2 be on air?".

A single gas cannot separate shunt from V/Q mismatch, so any projection to another FiO2 rests
on a model. The one used here is the effective shunt of that gas (the one-parameter model of
Karbing DS et al., Crit Care 2007;11:R118): the oxygen content the arterial blood lacks
against ideal end-capillary blood, D = Cc'O2 − CaO2, is taken to be the same on the other
FiO2 (the shunt equation, Berggren SM, Acta Physiol Scand 1942;4 Suppl 11, with a constant
a-v content difference). With the alveolar gas equation for the new FiO2 (same PB and PaCO2):

    D = Cc'O2(PAO2) − CaO2(PaO2)                     at the gas's FiO2
    CaO2' = Cc'O2(PAO2') − D                         at the other FiO2
    PaO2': k Hb S(PaO2') + 0.003 PaO2' = CaO2'

Two properties follow, both tested:

* The shunt fraction itself depends on the assumed a-v difference (Qs/Qt = D / (D + avd ×
  ...)), but D does not: the projection is the same for every assumed a-v difference, as long
  as the mixed venous content stays positive. Haemoglobin does move it, a little.
* Projected *down* in FiO2 it is an upper bound under the two-parameter model: low-V/Q units
  cost more content on a lower FiO2 (end-capillary blood falls onto the steep part of the
  curve), so a lung with a V/Q term does worse on air than its effective shunt says. For a
  pure shunt it is exact. (The a/A ratio held constant, Gilbert R & Keighley JF, Am Rev Respir
  Dis 1974, errs the other way for a shunt: a 30 % shunt on FiO2 1.0 projects to about 15 mmHg
  on air, where the shunt equation gives about 53.)

Pure: numbers in, numbers out; pressures in mm[Hg], contents in mL O2/dL.
"""

from __future__ import annotations

from dataclasses import dataclass

from service.exceptions import OutsideModelRangeError
from service.physiology import constants as c
from service.physiology.bounds import PARTIAL_PRESSURE_MMHG, require_possible
from service.physiology.oxygen_affinity import OxygenAffinity, standard_saturation
from service.physiology.oxygen_exchange import (
    ExchangeConditions,
    alveolar_terms,
    exchange_state,
    shunt_from_odds,
)
from service.physiology.units import FIO2_LIMITS


@dataclass(frozen=True, slots=True)
class ProjectedGas:
    """A gas carried to ``fio2``: the projected PaO2 and SaO2, the alveolar PO2 there, and the
    effective shunt of the gas (at the conditions' a-v difference) with its content deficit."""

    fio2: float
    alveolar_po2_mmhg: float
    arterial_po2_mmhg: float
    arterial_saturation: float
    effective_shunt: float
    content_deficit_ml_dl: float


def _end_capillary_content(po2_mmhg: float, conditions: ExchangeConditions, scale: float) -> float:
    kh = conditions.carrying_capacity_ml_dl
    return kh * standard_saturation(scale * po2_mmhg) + c.O2_SOLUBILITY_ML_DL_PER_MMHG * po2_mmhg


def project_gas(
    *,
    arterial_po2_mmhg: float,
    fio2: float,
    paco2_mmhg: float,
    target_fio2: float,
    conditions: ExchangeConditions,
    affinity: OxygenAffinity | None = None,
) -> ProjectedGas:
    """The PaO2 this gas would have on ``target_fio2``, by its effective shunt (module
    docstring). A PaO2 at or above the alveolar PO2 leaves no deficit: the projection is then
    that of a lung without shunt. On the gas's own FiO2 the projection is the gas itself.
    ``affinity`` defaults to the conditions' curve.

    Raises:
        ImpossibleValueError: an input outside its possible range.
        OutsideModelRangeError: the alveolar PO2 on either FiO2 at or below zero, or no steady
            state on the target FiO2 (the mixed venous content would reach zero).
    """
    require_possible("arterial_po2_mmhg", arterial_po2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    require_possible("paco2_mmhg", paco2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    require_possible("fio2", fio2, *FIO2_LIMITS, "1")
    require_possible("target_fio2", target_fio2, *FIO2_LIMITS, "1")
    scale = (conditions.affinity if affinity is None else affinity).scale
    alveolar, _, _ = alveolar_terms(fio2, paco2_mmhg, conditions)
    target_alveolar, _, _ = alveolar_terms(target_fio2, paco2_mmhg, conditions)
    for name, value in (("alveolar PO2", alveolar), ("target alveolar PO2", target_alveolar)):
        if value <= 0.0:
            raise OutsideModelRangeError(
                "paco2_mmhg", paco2_mmhg, f"leaves the {name} at or below zero"
            )
    capillary = _end_capillary_content(alveolar, conditions, scale)
    arterial = _end_capillary_content(min(arterial_po2_mmhg, alveolar), conditions, scale)
    deficit = max(capillary - arterial, 0.0)
    odds = deficit / conditions.av_difference_ml_dl
    if target_fio2 == fio2:
        return ProjectedGas(
            fio2=fio2,
            alveolar_po2_mmhg=alveolar,
            arterial_po2_mmhg=arterial_po2_mmhg,
            arterial_saturation=standard_saturation(scale * arterial_po2_mmhg),
            effective_shunt=shunt_from_odds(odds),
            content_deficit_ml_dl=deficit,
        )
    state = exchange_state(
        target_alveolar,
        0.0,
        odds,
        conditions.carrying_capacity_ml_dl,
        conditions.av_difference_ml_dl,
        scale,
    )
    if state is None:
        raise OutsideModelRangeError(
            "target_fio2",
            target_fio2,
            "the effective shunt of this gas leaves no steady state there (the mixed venous "
            "content would reach zero)",
        )
    return ProjectedGas(
        fio2=target_fio2,
        alveolar_po2_mmhg=target_alveolar,
        arterial_po2_mmhg=state.arterial_po2_mmhg,
        arterial_saturation=state.arterial_saturation,
        effective_shunt=shunt_from_odds(odds),
        content_deficit_ml_dl=deficit,
    )
