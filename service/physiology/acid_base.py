"""Acid-base consistency of a blood gas and the expected compensation for a PaCO2.

A gas reports pH, PaCO2 and HCO3, but the analyser computes HCO3 from the other two, so the
three must agree by the Henderson equation; when they do not, the values were mistyped, taken
from different samples, or the HCO3 came from a venous chemistry panel.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from enum import StrEnum

from service.physiology import constants as c
from service.physiology.bounds import (
    BICARBONATE_MMOL_L,
    CARBON_DIOXIDE_MMHG,
    HYDROGEN_ION_NMOL_L,
    PH,
    require_possible,
)


def hydrogen_ion_nmol_l(*, paco2_mmhg: float, hco3_mmol_l: float) -> float:
    """[H+] (nmol/L) by the Henderson equation: [H+] = 24 × PaCO2 / HCO3.

    Source: Kassirer JP, Bleich HL, "Rapid estimation of plasma carbon dioxide tension from pH
    and total carbon dioxide content", N Engl J Med 1965;272:1067.
    """
    require_possible("paco2_mmhg", paco2_mmhg, *CARBON_DIOXIDE_MMHG, "mm[Hg]")
    require_possible("hco3_mmol_l", hco3_mmol_l, *BICARBONATE_MMOL_L, "mmol/L")
    return c.HENDERSON_CONSTANT * paco2_mmhg / hco3_mmol_l


def ph_from_hydrogen_ion(*, hydrogen_ion_nmol_l: float) -> float:
    """pH from [H+] in nmol/L: pH = 9 − log10 [H+]."""
    require_possible("hydrogen_ion_nmol_l", hydrogen_ion_nmol_l, *HYDROGEN_ION_NMOL_L, "nmol/L")
    return 9.0 - math.log10(hydrogen_ion_nmol_l)


def hydrogen_ion_from_ph(*, ph: float) -> float:
    """[H+] in nmol/L from pH: [H+] = 10^(9 − pH)."""
    require_possible("ph", ph, *PH, "[pH]")
    return math.pow(10.0, 9.0 - ph)


@dataclass(frozen=True, slots=True)
class HendersonCheck:
    """How far a gas's pH and HCO3 are from what its own PaCO2 implies."""

    ph_implied: float  # from PaCO2 and the reported HCO3
    hco3_implied_mmol_l: float  # from PaCO2 and the measured pH

    ph_measured: float
    hco3_measured_mmol_l: float

    @property
    def ph_difference(self) -> float:
        """Measured minus implied pH."""
        return self.ph_measured - self.ph_implied

    @property
    def hco3_difference_mmol_l(self) -> float:
        """Measured minus implied HCO3 (mmol/L)."""
        return self.hco3_measured_mmol_l - self.hco3_implied_mmol_l


def henderson_check(*, ph: float, paco2_mmhg: float, hco3_mmol_l: float) -> HendersonCheck:
    """Compare a gas's pH, PaCO2 and HCO3 by [H+] = 24 × PaCO2 / HCO3 (Kassirer & Bleich 1965).

    The thresholds for "inconsistent" (common practice: |ΔpH| > 0.04, |ΔHCO3| > 3 mmol/L) are
    rule parameters, not decided here.
    """
    h_implied = hydrogen_ion_nmol_l(paco2_mmhg=paco2_mmhg, hco3_mmol_l=hco3_mmol_l)
    h_measured = hydrogen_ion_from_ph(ph=ph)
    return HendersonCheck(
        ph_implied=ph_from_hydrogen_ion(hydrogen_ion_nmol_l=h_implied),
        hco3_implied_mmol_l=c.HENDERSON_CONSTANT * paco2_mmhg / h_measured,
        ph_measured=ph,
        hco3_measured_mmol_l=hco3_mmol_l,
    )


class Chronicity(StrEnum):
    """Whether a respiratory disturbance has had time (days) for renal compensation."""

    ACUTE = "acute"
    CHRONIC = "chronic"


# HCO3 change per mmHg of PaCO2 change from 40 (Narins RG, Emmett M, Medicine 1980;59:161;
# Berend K, de Vries APJ, Gans ROB, N Engl J Med 2014;371:1434): acidosis +0.1 acute,
# +0.35 chronic (range 0.3–0.4); alkalosis −0.2 acute, −0.4 to −0.5 chronic (0.45 used).
HCO3_PER_MMHG = {
    (Chronicity.ACUTE, True): 0.1,
    (Chronicity.CHRONIC, True): 0.35,
    (Chronicity.ACUTE, False): 0.2,
    (Chronicity.CHRONIC, False): 0.45,
}


def expected_hco3_mmol_l(*, paco2_mmhg: float, chronicity: Chronicity) -> float:
    """HCO3 (mmol/L) expected from compensation alone for a primary respiratory disturbance.

        respiratory acidosis (PaCO2 > 40):  24 + 0.1 × ΔPaCO2 acute,  24 + 0.35 × ΔPaCO2 chronic
        respiratory alkalosis (PaCO2 < 40): 24 − 0.2 × |Δ| acute,     24 − 0.45 × |Δ| chronic

    Source: Narins & Emmett 1980; Berend, de Vries & Gans, NEJM 2014;371:1434 (Table).
    """
    require_possible("paco2_mmhg", paco2_mmhg, *CARBON_DIOXIDE_MMHG, "mm[Hg]")
    delta = paco2_mmhg - c.NORMAL_PACO2_MMHG
    slope = HCO3_PER_MMHG[(chronicity, delta > 0)]
    return c.NORMAL_HCO3_MMOL_L + slope * delta


@dataclass(frozen=True, slots=True)
class ExpectedRange:
    """An expected value with its published tolerance (same unit)."""

    expected: float
    tolerance: float

    @property
    def low(self) -> float:
        return self.expected - self.tolerance

    @property
    def high(self) -> float:
        return self.expected + self.tolerance


def expected_paco2_metabolic_acidosis_mmhg(*, hco3_mmol_l: float) -> ExpectedRange:
    """PaCO2 (mm[Hg]) of full respiratory compensation for a metabolic acidosis: Winters' formula.

        PaCO2 = 1.5 × HCO3 + 8 ± 2

    Source: Albert MS, Dell RB, Winters RW, "Quantitative displacement of acid-base equilibrium
    in metabolic acidosis", Ann Intern Med 1967;66:312; restated by Berend K, de Vries APJ,
    Gans ROB, N Engl J Med 2014;371:1434. A PaCO2 above the range is a respiratory acidosis
    on top (ventilation failing to compensate); below it, a respiratory alkalosis.
    """
    require_possible("hco3_mmol_l", hco3_mmol_l, *BICARBONATE_MMOL_L, "mmol/L")
    return ExpectedRange(1.5 * hco3_mmol_l + 8.0, 2.0)


def expected_paco2_metabolic_alkalosis_mmhg(*, hco3_mmol_l: float) -> ExpectedRange:
    """PaCO2 (mm[Hg]) of respiratory compensation for a metabolic alkalosis.

        PaCO2 = 40 + 0.7 × (HCO3 − 24) ± 2

    Source: Berend K, de Vries APJ, Gans ROB, N Engl J Med 2014;371:1434 (compensation table);
    the rise in PaCO2 from hypoventilation can reach about 55 mmHg.
    """
    require_possible("hco3_mmol_l", hco3_mmol_l, *BICARBONATE_MMOL_L, "mmol/L")
    return ExpectedRange(c.NORMAL_PACO2_MMHG + 0.7 * (hco3_mmol_l - c.NORMAL_HCO3_MMOL_L), 2.0)
