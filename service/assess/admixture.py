"""Derived facts of oxygen content and venous admixture (the shunt equation)."""

from __future__ import annotations

from service.config import Settings
from service.physiology import constants as c
from service.physiology import oxygen_content as oc
from service.physiology.saturation import saturation_from_po2

from .derivation import Computed, DerivedTable

table = DerivedTable()
# Percent of the cardiac output: no more than all of it. A negative value (arterial content
# above end-capillary) flags inconsistent inputs for the rules, down to as much again.
WHOLE_OUTPUT_PERCENT = 100.0
SHUNT_LIMITS = (-WHOLE_OUTPUT_PERCENT, WHOLE_OUTPUT_PERCENT)


def _carried(
    functional: float, carboxyhaemoglobin: float | None, methaemoglobin: float | None
) -> float:
    """The fraction of all haemoglobin carrying oxygen (COHb and MetHb carry none)."""
    return oc.fractional_saturation(
        functional_saturation=functional,
        carboxyhaemoglobin=carboxyhaemoglobin or 0.0,
        methaemoglobin=methaemoglobin or 0.0,
    )


@table.quantity(
    "arterial_o2_content",
    "mL/dL",
    (0.0, 40.0),
    1,
    "Oxygen content of arterial blood",
    result="arterial-o2-content",
)
def arterial_o2_content(
    *,
    haemoglobin: float,
    arterial_po2: float,
    settings: Settings,
    arterial_so2: float | None = None,
    carboxyhaemoglobin: float | None = None,
    methaemoglobin: float | None = None,
) -> Computed:
    measured = arterial_so2 is not None
    functional = (
        arterial_so2 if arterial_so2 is not None else saturation_from_po2(po2_mmhg=arterial_po2)
    )
    note = "measured SaO2" if measured else "SaO2 from PaO2 (Severinghaus)"
    if carboxyhaemoglobin or methaemoglobin:
        note += ", times (1 − COHb − MetHb)"
    hufner = settings.hufner_ml_per_g
    return Computed(
        oc.oxygen_content_ml_dl(
            haemoglobin_g_dl=haemoglobin,
            saturation=_carried(functional, carboxyhaemoglobin, methaemoglobin),
            po2_mmhg=arterial_po2,
            hufner_ml_per_g=hufner,
        ),
        f"CaO2 = {hufner:g} × Hb × SaO2 + {c.O2_SOLUBILITY_ML_DL_PER_MMHG:g} × PaO2 ({note})",
    )


@table.quantity(
    "shunt_fraction",
    "%",
    SHUNT_LIMITS,
    0,
    "Estimated right-to-left shunt fraction",
    result="shunt-fraction",
)
def shunt_fraction(
    *,
    haemoglobin: float,
    arterial_po2: float,
    alveolar_po2: float,
    arterial_o2_content: float,
    fio2: float,
    settings: Settings,
    arterial_so2: float | None = None,
    carboxyhaemoglobin: float | None = None,
    methaemoglobin: float | None = None,
    mixed_venous_so2: float | None = None,
    mixed_venous_po2: float | None = None,
) -> Computed | None:
    if alveolar_po2 <= arterial_po2:
        return None  # no end-capillary to arterial gap: nothing to apportion
    hufner = settings.hufner_ml_per_g
    capillary_saturation = oc.end_capillary_saturation(
        alveolar_po2_mmhg=alveolar_po2,
        arterial_po2_mmhg=arterial_po2,
        arterial_saturation=arterial_so2,
    )
    capillary = oc.oxygen_content_ml_dl(
        haemoglobin_g_dl=haemoglobin,
        saturation=_carried(capillary_saturation, carboxyhaemoglobin, methaemoglobin),
        po2_mmhg=alveolar_po2,
        hufner_ml_per_g=hufner,
    )
    venous_content: float | None = None
    difference: float | None = None
    if mixed_venous_so2 is not None:
        venous_content = oc.oxygen_content_ml_dl(
            haemoglobin_g_dl=haemoglobin,
            saturation=_carried(mixed_venous_so2, carboxyhaemoglobin, methaemoglobin),
            po2_mmhg=(
                mixed_venous_po2 if mixed_venous_po2 is not None else c.NORMAL_MIXED_VENOUS_PO2_MMHG
            ),
            hufner_ml_per_g=hufner,
        )
        venous = "measured mixed-venous content"
    else:
        difference = settings.assumed_av_difference_ml_dl
        venous = f"assumed a-v content difference {difference:g} mL/dL"
    kind = "true shunt" if fio2 >= c.TRUE_SHUNT_MIN_FIO2 else "venous admixture"
    return Computed(
        oc.shunt_fraction(
            end_capillary_content_ml_dl=capillary,
            arterial_content_ml_dl=arterial_o2_content,
            mixed_venous_content_ml_dl=venous_content,
            av_difference_ml_dl=difference,
        ),
        f"Qs/Qt = (CcO2 − CaO2) / (CcO2 − CvO2), {venous}; {kind}",
    )


FACTS = tuple(table.facts)
