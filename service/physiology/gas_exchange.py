"""Inspired and alveolar oxygen, the alveolar-arterial gradient and oxygenation ratios.

All pressures in mm[Hg], FiO2 as a fraction. The full alveolar gas equation is the service's
form; the simplified form is kept for comparison (at FiO2 1.0 it is 10 mmHg low when PaCO2
is 40, because it still divides PaCO2 by R).
"""

from __future__ import annotations

from enum import StrEnum

from service.exceptions import ImpossibleValueError
from service.physiology import constants as c
from service.physiology.bounds import (
    AGE_YEARS,
    PARTIAL_PRESSURE_MMHG,
    PRESSURE_BAROMETRIC_MMHG,
    RESPIRATORY_QUOTIENT,
    require_possible,
)
from service.physiology.units import FIO2_LIMITS


def inspired_po2_mmhg(
    *,
    fio2: float,
    barometric_mmhg: float = c.SEA_LEVEL_PRESSURE_MMHG,
    water_vapour_mmhg: float = c.WATER_VAPOUR_TEXTBOOK_MMHG,
) -> float:
    """Inspired PO2 of humidified gas in the airways: PIO2 = FiO2 × (PB − PH2O).

    Source: the alveolar gas equation's first term (West, Respiratory Physiology; Nunn's Applied
    Respiratory Physiology). PH2O is the saturation pressure at body temperature.

    Raises:
        ImpossibleValueError: FiO2 outside 0.10–1.0, PB outside 150–1200 mmHg, or PH2O ≥ PB.
    """
    require_possible("fio2", fio2, *FIO2_LIMITS, "1")
    require_possible("barometric_mmhg", barometric_mmhg, *PRESSURE_BAROMETRIC_MMHG, "mm[Hg]")
    require_possible("water_vapour_mmhg", water_vapour_mmhg, 0.0, barometric_mmhg, "mm[Hg]")
    return fio2 * (barometric_mmhg - water_vapour_mmhg)


def alveolar_po2_mmhg(
    *,
    fio2: float,
    paco2_mmhg: float,
    barometric_mmhg: float = c.SEA_LEVEL_PRESSURE_MMHG,
    water_vapour_mmhg: float = c.WATER_VAPOUR_TEXTBOOK_MMHG,
    respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT,
) -> float:
    """Alveolar PO2 by the full alveolar gas equation (mm[Hg]).

        PAO2 = FiO2 (PB − PH2O) − PaCO2 [FiO2 + (1 − FiO2) / R]

    PACO2 is taken equal to PaCO2. The bracket corrects for O2 uptake exceeding CO2 output; at
    FiO2 1.0 it equals 1. Source: the Riley–Fenn form (West, Respiratory Physiology; Nunn);
    written out in full, with the bracket, by Martin L, "The four most important equations in
    clinical practice".

    Raises:
        ImpossibleValueError: as ``inspired_po2_mmhg``, or PaCO2 / R outside their limits.
    """
    require_possible("paco2_mmhg", paco2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    require_possible("respiratory_quotient", respiratory_quotient, *RESPIRATORY_QUOTIENT, "1")
    pio2 = inspired_po2_mmhg(
        fio2=fio2, barometric_mmhg=barometric_mmhg, water_vapour_mmhg=water_vapour_mmhg
    )
    return pio2 - paco2_mmhg * (fio2 + (1.0 - fio2) / respiratory_quotient)


def alveolar_po2_simplified_mmhg(
    *,
    fio2: float,
    paco2_mmhg: float,
    barometric_mmhg: float = c.SEA_LEVEL_PRESSURE_MMHG,
    water_vapour_mmhg: float = c.WATER_VAPOUR_TEXTBOOK_MMHG,
    respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT,
) -> float:
    """Alveolar PO2 by the simplified bedside form (mm[Hg]): PAO2 = FiO2 (PB − PH2O) − PaCO2 / R.

    Reported only beside the full form: it understates PAO2 by PaCO2 × FiO2 × (1/R − 1)
    (10 mmHg at FiO2 1.0, PaCO2 40). Source: West, Respiratory Physiology.
    """
    require_possible("paco2_mmhg", paco2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    require_possible("respiratory_quotient", respiratory_quotient, *RESPIRATORY_QUOTIENT, "1")
    pio2 = inspired_po2_mmhg(
        fio2=fio2, barometric_mmhg=barometric_mmhg, water_vapour_mmhg=water_vapour_mmhg
    )
    return pio2 - paco2_mmhg / respiratory_quotient


def aa_gradient_mmhg(*, alveolar_po2_mmhg: float, arterial_po2_mmhg: float) -> float:
    """Alveolar–arterial PO2 gradient (mm[Hg]): A-a = PAO2 − PaO2.

    Positive when alveolar exceeds arterial, as normal; a clearly negative value means the
    inputs are wrong (FiO2 or PB understated, air in the sample). Returned as is: judging it is
    the rules' job.
    """
    require_possible("arterial_po2_mmhg", arterial_po2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    return alveolar_po2_mmhg - arterial_po2_mmhg


# Mellemgaard K, Acta Physiol Scand 1966;67:10: mean room-air A-a = 2.5 + 0.21 × age (mmHg).
MELLEMGAARD_INTERCEPT_MMHG = 2.5
MELLEMGAARD_SLOPE_MMHG_PER_YEAR = 0.21
# The bedside rule age / 4 + 4 (common practice).
AGE_RULE_DIVISOR_YEARS = 4.0
AGE_RULE_OFFSET_MMHG = 4.0


def aa_gradient_mean_for_age_mmhg(*, age_years: float) -> float:
    """Mean room-air A-a gradient for age (mm[Hg]): 2.5 + 0.21 × age.

    Source: Mellemgaard K, "The alveolar-arterial oxygen difference: its size and components in
    normal man", Acta Physiol Scand 1966;67:10–20. A regression mean, not an upper limit.
    """
    require_possible("age_years", age_years, *AGE_YEARS, "a")
    return MELLEMGAARD_INTERCEPT_MMHG + MELLEMGAARD_SLOPE_MMHG_PER_YEAR * age_years


def aa_gradient_age_rule_mmhg(*, age_years: float) -> float:
    """Upper limit of the room-air A-a gradient by the bedside rule: age / 4 + 4 (mm[Hg]).

    Common practice (widely taught; no primary source known).
    """
    require_possible("age_years", age_years, *AGE_YEARS, "a")
    return age_years / AGE_RULE_DIVISOR_YEARS + AGE_RULE_OFFSET_MMHG


def aa_gradient_upper_limit_mmhg(*, age_years: float) -> float:
    """The age-expected room-air A-a limit used to call a gradient raised: the higher of
    Mellemgaard's mean (2.5 + 0.21 × age) and the age/4 + 4 rule.

    Between the two is "borderline"; see ``classify_aa_gradient``.
    """
    return max(
        aa_gradient_mean_for_age_mmhg(age_years=age_years),
        aa_gradient_age_rule_mmhg(age_years=age_years),
    )


class AaGradientClass(StrEnum):
    """A room-air A-a gradient judged against the age-expected limits."""

    NORMAL = "normal"
    BORDERLINE = "borderline"
    RAISED = "raised"


def classify_aa_gradient(*, aa_gradient_mmhg: float, age_years: float) -> AaGradientClass:
    """Judge a room-air A-a gradient for age: raised above the higher of the two age limits,
    borderline between them, normal at or below the lower.

    Valid on room air only: the normal gradient widens with FiO2 (50–100 mmHg on FiO2 1.0).
    """
    limits = sorted(
        (
            aa_gradient_mean_for_age_mmhg(age_years=age_years),
            aa_gradient_age_rule_mmhg(age_years=age_years),
        )
    )
    if aa_gradient_mmhg > limits[1]:
        return AaGradientClass.RAISED
    if aa_gradient_mmhg > limits[0]:
        return AaGradientClass.BORDERLINE
    return AaGradientClass.NORMAL


def arterial_alveolar_ratio(*, arterial_po2_mmhg: float, alveolar_po2_mmhg: float) -> float:
    """The a/A ratio, PaO2 / PAO2; about 0.75 or more is normal (common practice).

    Raises:
        ImpossibleValueError: PAO2 not positive (the ratio has no meaning).
    """
    require_possible("alveolar_po2_mmhg", alveolar_po2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    if not alveolar_po2_mmhg > 0.0:
        raise ImpossibleValueError(
            "alveolar_po2_mmhg", alveolar_po2_mmhg, "the ratio needs a positive alveolar PO2"
        )
    require_possible("arterial_po2_mmhg", arterial_po2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    return arterial_po2_mmhg / alveolar_po2_mmhg


def pf_ratio_mmhg(*, arterial_po2_mmhg: float, fio2: float) -> float:
    """PaO2/FiO2 (the Horowitz index, LOINC 50984-4) in mm[Hg].

    Source: ARDS Definition Task Force (Berlin), JAMA 2012;307:2526 — bands 300 / 200 / 100.
    """
    require_possible("arterial_po2_mmhg", arterial_po2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    require_possible("fio2", fio2, *FIO2_LIMITS, "1")
    return arterial_po2_mmhg / fio2


def pf_ratio_altitude_adjusted_mmhg(*, pf_ratio_mmhg: float, barometric_mmhg: float) -> float:
    """P/F corrected for altitude as the Berlin definition proposes: P/F × PB / 760.

    Source: ARDS Definition Task Force, JAMA 2012;307:2526 (table footnote, above 1000 m).
    """
    require_possible("barometric_mmhg", barometric_mmhg, *PRESSURE_BAROMETRIC_MMHG, "mm[Hg]")
    return pf_ratio_mmhg * barometric_mmhg / c.SEA_LEVEL_PRESSURE_MMHG


def sf_ratio(*, spo2: float, fio2: float) -> float:
    """SpO2/FiO2 with SpO2 in percent, as published (e.g. 96 % on 0.21 gives 457).

    ``spo2`` is a fraction (canonical); the ratio uses its percentage, as Rice TW et al.,
    Chest 2007;132:410 and the 2024 global ARDS definition do.
    """
    require_possible("spo2", spo2, 0.0, 1.0, "1")
    require_possible("fio2", fio2, *FIO2_LIMITS, "1")
    return spo2 * 100.0 / fio2


# Rice TW et al., "Comparison of the SpO2/FIO2 ratio and the PaO2/FIO2 ratio in patients with
# acute lung injury or ARDS", Chest 2007;132:410–417: S/F = 64 + 0.84 × P/F (SpO2 ≤ 97 %).
RICE_INTERCEPT = 64.0
RICE_SLOPE = 0.84


def sf_from_pf(*, pf_ratio_mmhg: float) -> float:
    """The S/F equivalent of a P/F (Rice 2007): S/F = 64 + 0.84 × P/F."""
    return RICE_INTERCEPT + RICE_SLOPE * pf_ratio_mmhg


def pf_from_sf(*, sf_ratio: float) -> float:
    """The P/F equivalent of an S/F (Rice 2007, inverted): P/F = (S/F − 64) / 0.84, mm[Hg]."""
    return (sf_ratio - RICE_INTERCEPT) / RICE_SLOPE


def lowest_fio2_for_pao2(
    *,
    arterial_po2_mmhg: float,
    paco2_mmhg: float,
    barometric_mmhg: float,
    water_vapour_mmhg: float,
    respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT,
    tolerance_mmhg: float = 0.0,
) -> float:
    """The least FiO2 at which the alveolar PO2 reaches PaO2 − tolerance (full equation).

    Solving PAO2 = FiO2 (PB − PH2O − PaCO2 + PaCO2/R) − PaCO2/R for FiO2. An arterial PO2 above
    the alveolar PO2 is impossible, so the data themselves say the FiO2 was at least this
    (which bounds an unknown or estimated FiO2 from below).
    """
    require_possible("paco2_mmhg", paco2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    require_possible("respiratory_quotient", respiratory_quotient, *RESPIRATORY_QUOTIENT, "1")
    slope = barometric_mmhg - water_vapour_mmhg + paco2_mmhg * (1.0 / respiratory_quotient - 1.0)
    return (arterial_po2_mmhg - tolerance_mmhg + paco2_mmhg / respiratory_quotient) / slope


def lowest_barometric_for_pao2(
    *,
    arterial_po2_mmhg: float,
    paco2_mmhg: float,
    fio2: float,
    water_vapour_mmhg: float,
    respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT,
    tolerance_mmhg: float = 0.0,
) -> float:
    """The least barometric pressure at which the alveolar PO2 reaches PaO2 − tolerance.

    Solving the full alveolar gas equation for PB: PB = (PaO2 − tol + PaCO2 k) / FiO2 + PH2O,
    k = FiO2 + (1 − FiO2)/R. Bounds an assumed (unknown) pressure from below.
    """
    require_possible("fio2", fio2, *FIO2_LIMITS, "1")
    require_possible("paco2_mmhg", paco2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    k = fio2 + (1.0 - fio2) / respiratory_quotient
    return (arterial_po2_mmhg - tolerance_mmhg + paco2_mmhg * k) / fio2 + water_vapour_mmhg
