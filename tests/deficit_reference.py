"""The PaO2 deficit partition computed independently of the service, for the surface tests.

One invented patient, chosen so that every number follows from published equations alone:
64 years old, breathing air (FiO2 0.21) at a measured 760 mm[Hg], PaCO2 55 and PaO2 50 mm[Hg].

* Expected PaO2 for age: Cerveri I et al., Am J Respir Crit Care Med 1995;152:934, 40–74 years:
  143.6 − 0.39 × age − 0.56 × BMI − 0.57 × PaCO2, for the reference person (BMI 25 kg/m², the
  WHO boundary of normal; PaCO2 40 mm[Hg], the centre of the 35–45 range: common practice).
* Water vapour at 37 °C (the temperature the analyser reports at): IAPWS-IF97 saturation
  pressure from the ``iapws`` package (PyPI).
* Inspired and alveolar PO2: PIO2 = FiO2 (PB − PH2O); the alveolar gas equation, full form,
  PAO2 = PIO2 − PaCO2 [FiO2 + (1 − FiO2)/R], R 0.8 (West, Respiratory Physiology).
* The normal A-a gradient for age: on air at sea level, reference PAO2 − expected PaO2 (the
  definition of the expected PaO2); at a lower alveolar PO2 the normal a/A ratio holds
  (Gilbert R, Keighley JF, Am Rev Respir Dis 1974; from memory), so the normal gradient scales
  with the alveolar PO2.
* Expected PaCO2 at sea level: 40 mm[Hg] (common practice).

The parts then follow from their definitions: inspired = what the setting does to a healthy
lung (zero here: sea level, air); ventilation = the alveolar PO2 lost to the PaCO2 above 40,
less the narrowing of the normal gradient that goes with it; gas exchange = A-a gradient
above the normal at this alveolar PO2.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from iapws.iapws97 import _PSat_T

from tests.fhir.builders import bundle, observation, patient

PA_PER_MMHG = 133.322387415  # BIPM SI Brochure: 1 mmHg = 133.322 387 415 Pa
KPA_PER_MMHG = PA_PER_MMHG / 1000.0

AGE_YEARS = 64.0  # born 1961-04-12 (builders.patient), gas on 2026-01-05 (builders.WHEN)
FIO2 = 0.21
PB_MMHG = 760.0
PACO2_MMHG = 55.0
PAO2_MMHG = 50.0
R = 0.8
REFERENCE_BMI = 25.0
REFERENCE_PACO2_MMHG = 40.0


@dataclass(frozen=True)
class Reference:
    expected: float
    fall: float
    inspired: float
    ventilation: float
    gas_exchange: float

    def parts(self) -> dict[str, float]:
        return {
            "inspired": self.inspired,
            "ventilation": self.ventilation,
            "gas-exchange": self.gas_exchange,
        }


def cerveri_expected_pao2(age: float) -> float:
    """Cerveri 1995, 40–74 years, BMI 25, PaCO2 40."""
    return 143.6 - 0.39 * age - 0.56 * REFERENCE_BMI - 0.57 * REFERENCE_PACO2_MMHG


def water_vapour_37_mmhg() -> float:
    """IAPWS-IF97 saturation pressure at 37 °C (``iapws``), in mm[Hg]."""
    return float(_PSat_T(37.0 + 273.15)) * 1e6 / PA_PER_MMHG


def alveolar(fio2: float, pb: float, paco2: float) -> float:
    """Alveolar gas equation, full form (West)."""
    return fio2 * (pb - water_vapour_37_mmhg()) - paco2 * (fio2 + (1.0 - fio2) / R)


def reference() -> Reference:
    expected = cerveri_expected_pao2(AGE_YEARS)
    reference_alveolar = alveolar(0.21, 760.0, REFERENCE_PACO2_MMHG)
    normal_at_reference = reference_alveolar - expected
    pao2_alveolar = alveolar(FIO2, PB_MMHG, PACO2_MMHG)
    assert pao2_alveolar < reference_alveolar  # the a/A ratio region
    normal_here = normal_at_reference * pao2_alveolar / reference_alveolar
    gas_exchange = (pao2_alveolar - PAO2_MMHG) - normal_here
    ventilation = (PACO2_MMHG - REFERENCE_PACO2_MMHG) * (FIO2 + (1 - FIO2) / R) + (
        normal_here - normal_at_reference
    )
    return Reference(expected, expected - PAO2_MMHG, 0.0, ventilation, gas_exchange)


def reference_bundle(*, with_paco2: bool = True) -> dict[str, Any]:
    """The patient's FHIR Bundle (invented, tagged HTEST)."""
    resources = [
        patient(),
        observation("2703-7", PAO2_MMHG, "mm[Hg]", oid="pao2"),
        observation("3150-0", FIO2 * 100.0, "%", oid="fio2"),
        observation("76268-2", PB_MMHG, "mm[Hg]", oid="pb"),
    ]
    if with_paco2:
        resources.append(observation("2019-8", PACO2_MMHG, "mm[Hg]", oid="paco2"))
    return bundle(*resources)
