"""The built-in demo: an invented patient, worked through the physiology core.

Scenario (invented): a 68-year-old visitor to a town at 2,500 m, breathing room air, with
PaO2 48 and PaCO2 31 mmHg, Hb 16.2 g/dL, SaO2 84 %, temperature 37.4 °C.
"""

from __future__ import annotations

from service.physiology.atmosphere import AltitudeModel, barometric_pressure_mmhg
from service.physiology.gas_exchange import (
    aa_gradient_mmhg,
    aa_gradient_upper_limit_mmhg,
    alveolar_po2_mmhg,
    arterial_alveolar_ratio,
    classify_aa_gradient,
    inspired_po2_mmhg,
    pf_ratio_mmhg,
)
from service.physiology.oxygen_content import oxygen_content_ml_dl
from service.physiology.water_vapour import water_vapour_pressure_mmhg

CAUTION = (
    "Decision support for qualified clinicians, not a diagnosis. It depends on the data it "
    "was sent and defers to clinical judgement and local protocols."
)


def run_demo() -> str:
    """Return the demo report as text."""
    age, altitude, fio2, pao2, paco2 = 68, 2500.0, 0.21, 48.0, 31.0
    hb, sao2, temp = 16.2, 0.84, 37.4
    pb = barometric_pressure_mmhg(altitude_m=altitude)
    ph2o = water_vapour_pressure_mmhg(temperature_cel=temp)
    pio2 = inspired_po2_mmhg(fio2=fio2, barometric_mmhg=pb, water_vapour_mmhg=ph2o)
    pao2_alv = alveolar_po2_mmhg(
        fio2=fio2, paco2_mmhg=paco2, barometric_mmhg=pb, water_vapour_mmhg=ph2o
    )
    aa = aa_gradient_mmhg(alveolar_po2_mmhg=pao2_alv, arterial_po2_mmhg=pao2)
    lines = [
        "oxyrule demo: an invented 68-year-old at 2,500 m on room air",
        f"  barometric pressure   {pb:6.1f} mm[Hg]  (West 1996 model atmosphere, "
        f"{AltitudeModel.WEST_1996.value})",
        f"  water vapour          {ph2o:6.1f} mm[Hg]  (IAPWS-IF97 at {temp} Cel)",
        f"  inspired PO2          {pio2:6.1f} mm[Hg]",
        f"  alveolar PO2          {pao2_alv:6.1f} mm[Hg]  (full alveolar gas equation, R 0.8)",
        f"  A-a gradient          {aa:6.1f} mm[Hg]  (age limit "
        f"{aa_gradient_upper_limit_mmhg(age_years=age):.1f}: "
        f"{classify_aa_gradient(aa_gradient_mmhg=aa, age_years=age).value})",
        f"  a/A ratio             "
        f"{arterial_alveolar_ratio(arterial_po2_mmhg=pao2, alveolar_po2_mmhg=pao2_alv):6.2f}",
        f"  P/F ratio             {pf_ratio_mmhg(arterial_po2_mmhg=pao2, fio2=fio2):6.0f} mm[Hg]",
        f"  arterial O2 content   "
        f"{oxygen_content_ml_dl(haemoglobin_g_dl=hb, saturation=sao2, po2_mmhg=pao2):6.1f} mL/dL",
        "",
        CAUTION,
        "",
    ]
    return "\n".join(lines)
