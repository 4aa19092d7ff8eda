"""The iso-shunt relation, shared by the shunt-equation and oxygen-response tests.

Iso-shunt diagram: Benatar SR, Hewlett AM & Nunn JF, "The use of iso-shunt lines for control of
oxygen therapy", Br J Anaesth 1973;45:711 (its figure from memory: PaO2 against FiO2 for
constant shunts, drawn for Hb 10–14 g/dL, a-v difference 5 mL/dL, PaCO2 25–40 mmHg). The
values below are that diagram regenerated from the equations [calc] with Hb 14 g/dL, a-v
difference 5 mL/dL, PaCO2 40 mmHg, PB 760 mmHg, the full alveolar gas equation and the
Severinghaus 1979 curve.
"""

from __future__ import annotations

from service.physiology.gas_exchange import alveolar_po2_mmhg
from service.physiology.oxygen_content import (
    end_capillary_content_ml_dl,
    oxygen_content_ml_dl,
    shunt_fraction,
)
from service.physiology.saturation import saturation_from_po2

ISO_SHUNT_HAEMOGLOBIN_G_DL = 14.0
ISO_SHUNT_AV_DIFFERENCE_ML_DL = 5.0
ISO_SHUNT_PACO2_MMHG = 40.0

# (shunt fraction, FiO2, PaO2 mm[Hg]) [calc], read to ±1.5 mmHg.
ISO_SHUNT_TABLE = [
    (0.05, 0.21, 87.0),
    (0.10, 0.50, 158.0),
    (0.20, 0.60, 101.0),
    (0.20, 1.00, 264.0),
    (0.30, 1.00, 100.0),
    (0.50, 1.00, 48.0),
]


def pao2_on_iso_shunt_line(*, shunt: float, fio2: float) -> float:
    """The PaO2 at which the classic shunt equation returns ``shunt``: bisection on PaO2
    through ``oxygen_content`` with the assumptions above (an implementation independent of
    the oxygen-response model)."""
    alveolar = alveolar_po2_mmhg(fio2=fio2, paco2_mmhg=ISO_SHUNT_PACO2_MMHG)

    def computed_shunt(pao2: float) -> float:
        capillary = end_capillary_content_ml_dl(
            haemoglobin_g_dl=ISO_SHUNT_HAEMOGLOBIN_G_DL,
            alveolar_po2_mmhg=alveolar,
            arterial_po2_mmhg=pao2,
        )
        arterial = oxygen_content_ml_dl(
            haemoglobin_g_dl=ISO_SHUNT_HAEMOGLOBIN_G_DL,
            saturation=saturation_from_po2(po2_mmhg=pao2),
            po2_mmhg=pao2,
        )
        return shunt_fraction(
            end_capillary_content_ml_dl=capillary,
            arterial_content_ml_dl=arterial,
            av_difference_ml_dl=ISO_SHUNT_AV_DIFFERENCE_ML_DL,
        )

    low, high = 1.0, alveolar
    for _ in range(100):
        middle = (low + high) / 2
        if computed_shunt(middle) > shunt:
            low = middle
        else:
            high = middle
    return (low + high) / 2
