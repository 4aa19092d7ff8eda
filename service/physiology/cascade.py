"""The normal oxygen cascade: the PO2 a healthy person of the same age would have at each
step, breathing the same gas (same barometric pressure, FiO2 and water vapour pressure).

* inspired: PIO2 = FiO2 × (PB − PH2O);
* alveolar: the alveolar gas equation (full form) with the normal PaCO2 (40 mmHg, common
  practice);
* arterial: the normal alveolar PO2 less the A-a gradient a healthy person of this age has
  at that alveolar PO2 (``reference.normal_aa_gradient``: Cerveri 1995 on air, the
  healthy-lung model on oxygen);
* mixed venous: the normal resting mixed-venous PO2 (``constants``, common practice).

Pure: numbers in mm[Hg] in, numbers out, with the reason for each value that cannot exist
(no age, no FiO2, no alveolar oxygen left at PaCO2 40).
"""

from __future__ import annotations

from dataclasses import dataclass, field

from service.exceptions import PhysiologyError
from service.physiology import constants as c
from service.physiology.gas_exchange import alveolar_po2_mmhg, inspired_po2_mmhg
from service.physiology.reference import normal_aa_gradient

__all__ = ["NormalCascade", "normal_cascade"]


@dataclass(frozen=True, slots=True)
class NormalCascade:
    """The normal PO2 at each step (mm[Hg]), or None with the reason in ``missing``."""

    inspired_mmhg: float | None
    alveolar_mmhg: float | None
    arterial_mmhg: float | None
    mixed_venous_mmhg: float
    aa_limit_mmhg: float | None
    """The A-a gradient of a healthy person of this age at the normal alveolar PO2 (the
    expected value, not the upper limit: the line is a healthy person's, not a boundary)."""
    missing: dict[str, str] = field(default_factory=dict)
    """Why a step has no normal value, by step (inspired, alveolar, arterial)."""


def normal_cascade(
    *,
    fio2: float | None,
    barometric_mmhg: float | None,
    age_years: float | None,
    water_vapour_mmhg: float = c.WATER_VAPOUR_TEXTBOOK_MMHG,
    respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT,
) -> NormalCascade:
    """The normal cascade for one age, PB and FiO2 (see the module docstring)."""
    missing: dict[str, str] = {}
    venous = c.NORMAL_MIXED_VENOUS_PO2_MMHG
    aa_limit: float | None = None
    if age_years is None:
        missing["arterial"] = "age not known, so no age-expected A-a gradient"
    if fio2 is None or barometric_mmhg is None:
        why = "FiO2 not known" if fio2 is None else "barometric pressure not known"
        missing.update(inspired=why, alveolar=why, arterial=why)
        return NormalCascade(None, None, None, venous, aa_limit, missing)
    try:
        inspired = inspired_po2_mmhg(
            fio2=fio2, barometric_mmhg=barometric_mmhg, water_vapour_mmhg=water_vapour_mmhg
        )
        alveolar = alveolar_po2_mmhg(
            fio2=fio2,
            paco2_mmhg=c.NORMAL_PACO2_MMHG,
            barometric_mmhg=barometric_mmhg,
            water_vapour_mmhg=water_vapour_mmhg,
            respiratory_quotient=respiratory_quotient,
        )
    except PhysiologyError as error:
        missing.update(inspired=str(error), alveolar=str(error), arterial=str(error))
        return NormalCascade(None, None, None, venous, aa_limit, missing)
    if alveolar <= 0:
        # Extreme altitude or a hypoxic mixture: with PaCO2 40 no oxygen would be left, so no
        # normal line exists there (people survive it only by hyperventilating).
        shown = f"{alveolar:.1f}".replace("-", "−")
        why = (
            f"with PaCO2 {c.NORMAL_PACO2_MMHG:g} mmHg no alveolar oxygen is left at this PB "
            f"and FiO2: the equation gives {shown} mmHg"
        )
        missing.update(alveolar=why, arterial=why)
        return NormalCascade(inspired, None, None, venous, aa_limit, missing)
    arterial = None
    if age_years is not None:
        try:
            aa_limit = normal_aa_gradient(
                age_years=age_years,
                alveolar_po2_mmhg=alveolar,
                respiratory_quotient=respiratory_quotient,
            ).expected
        except PhysiologyError as error:
            missing["arterial"] = f"no age-expected A-a gradient ({error})"
        else:
            arterial = alveolar - aa_limit
            if arterial <= 0:
                arterial = None
                missing["arterial"] = "the age-expected A-a gradient exceeds the alveolar PO2"
    return NormalCascade(inspired, alveolar, arterial, venous, aa_limit, missing)
