"""Derived facts of acid-base: expected compensation for the PaCO2 and the Henderson check."""

from __future__ import annotations

import math
from functools import lru_cache

from service.physiology import acid_base as ab
from service.physiology import constants as c
from service.physiology.bounds import (
    BICARBONATE_MMOL_L,
    CARBON_DIOXIDE_MMHG,
    HYDROGEN_ION_NMOL_L,
    PH,
)

from .derivation import Computed, DerivedTable

table = DerivedTable()
# _COMPLETE_GAS: the HCO3 is compared with the compensation expected for the PaCO2 only on a
# gas whose pH is known too. The comparison judges an acid-base state, and the rules read its
# direction from the pH; a gas whose pH is missing or was refused gets no chronicity finding.
MMOL_L = "mmol/L"


# The range of each derived fact is the image of its inputs' ranges, so nothing computed from
# accepted values is refused, and each limit keeps one owner (physiology/bounds.py).
def _expected(chronicity: ab.Chronicity) -> tuple[float, float]:
    # Compensation rises with PaCO2 on both sides of 40 mmHg: the ends map to the ends.
    low, high = CARBON_DIOXIDE_MMHG
    return (
        ab.expected_hco3_mmol_l(paco2_mmhg=low, chronicity=chronicity),
        ab.expected_hco3_mmol_l(paco2_mmhg=high, chronicity=chronicity),
    )


def _above(expected: tuple[float, float]) -> tuple[float, float]:
    return BICARBONATE_MMOL_L[0] - expected[1], BICARBONATE_MMOL_L[1] - expected[0]


_ACUTE = _expected(ab.Chronicity.ACUTE)
_CHRONIC = _expected(ab.Chronicity.CHRONIC)
# pH implied by PaCO2 and HCO3 lies where [H+] may (9 − log10 [H+]); HCO3 implied by PaCO2 and
# the measured pH is at most 24 × PaCO2 / the lowest [H+] of a possible pH.
_PH_IMPLIED = (9.0 - math.log10(HYDROGEN_ION_NMOL_L[1]), 9.0 - math.log10(HYDROGEN_ION_NMOL_L[0]))
_PH_DIFFERENCE = (PH[0] - _PH_IMPLIED[1], PH[1] - _PH_IMPLIED[0])
_HCO3_IMPLIED_MAX = (
    c.HENDERSON_CONSTANT * CARBON_DIOXIDE_MMHG[1] / ab.hydrogen_ion_from_ph(ph=PH[1])
)
_HCO3_DIFFERENCE = (BICARBONATE_MMOL_L[0] - _HCO3_IMPLIED_MAX, BICARBONATE_MMOL_L[1])


@table.quantity(
    "expected_hco3_acute",
    MMOL_L,
    _ACUTE,
    1,
    "Expected HCO3 for an acute CO2 change",
    result="expected-hco3",
)
def expected_hco3_acute(*, arterial_pco2: float) -> Computed:
    return Computed(
        ab.expected_hco3_mmol_l(paco2_mmhg=arterial_pco2, chronicity=ab.Chronicity.ACUTE),
        _ACUTE_METHOD,
    )


def _acute_method() -> str:
    acute = ab.HCO3_PER_MMHG
    rise, fall = acute[(ab.Chronicity.ACUTE, True)], acute[(ab.Chronicity.ACUTE, False)]
    return (
        f"expected HCO3 for an acute respiratory change: {c.NORMAL_HCO3_MMOL_L:g} + {rise:g} per "
        f"mmHg PaCO2 above {c.NORMAL_PACO2_MMHG:g} ({fall:g} per mmHg below)"
    )


# Fixed numbers make a fixed text: written once at import, not on every call.
_ACUTE_METHOD = _acute_method()


@table.quantity("expected_hco3_chronic", MMOL_L, _CHRONIC, 1, "Expected HCO3, chronic CO2 change")
def expected_hco3_chronic(*, arterial_pco2: float) -> float:
    return ab.expected_hco3_mmol_l(paco2_mmhg=arterial_pco2, chronicity=ab.Chronicity.CHRONIC)


@table.quantity(
    "hco3_above_expected_acute",
    MMOL_L,
    _above(_ACUTE),
    1,
    "Reported HCO3 minus the expected HCO3 for an acute CO2 change",
)
def hco3_above_expected_acute(
    *, arterial_ph: float, arterial_hco3: float, expected_hco3_acute: float
) -> float:
    del arterial_ph  # needed, not used: see _COMPLETE_GAS
    return arterial_hco3 - expected_hco3_acute


@table.quantity(
    "hco3_above_expected_chronic",
    MMOL_L,
    _above(_CHRONIC),
    1,
    "Reported HCO3 minus the expected HCO3 for a chronic CO2 change",
)
def hco3_above_expected_chronic(
    *, arterial_ph: float, arterial_hco3: float, expected_hco3_chronic: float
) -> float:
    del arterial_ph  # needed, not used: see _COMPLETE_GAS
    return arterial_hco3 - expected_hco3_chronic


@table.quantity(
    "hco3_henderson_difference",
    MMOL_L,
    _HCO3_DIFFERENCE,
    1,
    "Reported HCO3 minus HCO3 computed from pH and PaCO2",
)
def hco3_henderson_difference(
    *, arterial_ph: float, arterial_pco2: float, arterial_hco3: float
) -> float:
    return _henderson(arterial_ph, arterial_pco2, arterial_hco3).hco3_difference_mmol_l


@lru_cache(maxsize=64)
def _henderson(ph: float, paco2: float, hco3: float) -> ab.HendersonCheck:
    """The Henderson check of one gas: both differences read it (cached, a pure function; an
    impossible input raises, and a raise is never cached)."""
    return ab.henderson_check(ph=ph, paco2_mmhg=paco2, hco3_mmol_l=hco3)


@table.quantity(
    "ph_henderson_difference",
    "[pH]",
    _PH_DIFFERENCE,
    2,
    "Measured pH minus pH computed from PaCO2 and HCO3",
)
def ph_henderson_difference(
    *, arterial_ph: float, arterial_pco2: float, arterial_hco3: float
) -> float:
    return _henderson(arterial_ph, arterial_pco2, arterial_hco3).ph_difference


@table.quantity(
    "ph_henderson_gap",
    "[pH]",
    (0.0, max(-_PH_DIFFERENCE[0], _PH_DIFFERENCE[1])),
    2,
    "Size of ph_henderson_difference, whatever its sign",
)
def ph_henderson_gap(*, ph_henderson_difference: float) -> float:
    return abs(ph_henderson_difference)


@table.quantity(
    "paco2_winters_high",
    "mm[Hg]",
    (0.0, 250.0),
    1,
    "Top of Winters' range for this HCO3: 1.5 × HCO3 + 8 + 2",
)
def paco2_winters_high(*, arterial_hco3: float) -> Computed:
    return Computed(
        ab.expected_paco2_metabolic_acidosis_mmhg(hco3_mmol_l=arterial_hco3).high,
        "Winters' formula, 1.5 × HCO3 + 8 ± 2 (Albert, Dell & Winters 1967), upper end",
    )


@table.quantity(
    "paco2_above_winters",
    "mm[Hg]",
    (-250.0, 250.0),
    1,
    "PaCO2 minus the top of Winters' range (positive: ventilation not compensating)",
)
def paco2_above_winters(*, arterial_pco2: float, paco2_winters_high: float) -> float:
    return arterial_pco2 - paco2_winters_high


@table.quantity(
    "paco2_alkalosis_compensation_high",
    "mm[Hg]",
    (0.0, 250.0),
    1,
    "Top of the PaCO2 that compensates a metabolic alkalosis: 40 + 0.7 (HCO3 − 24) + 2",
)
def paco2_alkalosis_compensation_high(*, arterial_hco3: float) -> Computed:
    return Computed(
        ab.expected_paco2_metabolic_alkalosis_mmhg(hco3_mmol_l=arterial_hco3).high,
        "40 + 0.7 × (HCO3 − 24) ± 2 (Berend, de Vries & Gans 2014), upper end",
    )


@table.quantity(
    "paco2_above_alkalosis_compensation",
    "mm[Hg]",
    (-250.0, 250.0),
    1,
    "PaCO2 minus the top of the compensation for a metabolic alkalosis",
)
def paco2_above_alkalosis_compensation(
    *, arterial_pco2: float, paco2_alkalosis_compensation_high: float
) -> float:
    return arterial_pco2 - paco2_alkalosis_compensation_high


FACTS = tuple(table.facts)
