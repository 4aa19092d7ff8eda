"""The oxyhaemoglobin dissociation curve: saturation from PO2 and PO2 from saturation.

Severinghaus's 1979 equation describes the standard human curve (37 °C, pH 7.40, PCO2 40 mmHg,
normal 2,3-DPG and adult haemoglobin). Its exact inverse (a cubic, solved by Cardano's
formula) turns a saturation back into a PO2; used on SpO2 it imputes PaO2, which is valid
only where the curve is steep (SpO2 ≤ 96 %).
"""

from __future__ import annotations

import math

from service.exceptions import ImpossibleValueError
from service.physiology import constants as c
from service.physiology.bounds import PARTIAL_PRESSURE_MMHG, require_in_model, require_possible


def saturation_from_po2(*, po2_mmhg: float) -> float:
    """Haemoglobin O2 saturation (fraction) at ``po2_mmhg`` on the standard curve.

        S = 1 / (23400 / (PO2³ + 150 PO2) + 1)

    Source: Severinghaus JW, "Simple, accurate equations for human blood O2 dissociation
    computations", J Appl Physiol 1979;46:599–602, eq. 1 (fits the standard curve within ±0.0055).

    Raises:
        ImpossibleValueError: PO2 negative or above 1200 mmHg.
    """
    require_possible("po2_mmhg", po2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    if po2_mmhg == 0.0:
        return 0.0
    return 1.0 / (c.SEVERINGHAUS_A / (po2_mmhg**3 + c.SEVERINGHAUS_B * po2_mmhg) + 1.0)


def po2_from_saturation(*, saturation: float) -> float:
    """PO2 (mm[Hg]) on the standard curve at ``saturation`` (fraction): the exact inverse of eq. 1.

    Cardano's solution of PO2³ + 150 PO2 = 23400 S / (1 − S):

        A = 11700 / (1/S − 1);  B = √(50³ + A²);  PO2 = ∛(B + A) − ∛(B − A)

    Source: Ellis RK, J Appl Physiol 1989;67:902 (exact inverse of Severinghaus 1979 eq. 1).

    Raises:
        ImpossibleValueError: saturation not strictly between 0 and 1.
    """
    require_possible("saturation", saturation, 0.0, 1.0, "1")
    if saturation in (0.0, 1.0):
        raise _no_finite_po2(saturation)
    a = (c.SEVERINGHAUS_A / 2.0) / (1.0 / saturation - 1.0)
    b = math.sqrt((c.SEVERINGHAUS_B / 3.0) ** 3 + a**2)
    return math.cbrt(b + a) - math.cbrt(b - a)


def _no_finite_po2(saturation: float) -> ImpossibleValueError:
    """The error for a saturation of exactly 0 or 1, where the inverse has no finite answer."""
    return ImpossibleValueError(
        "saturation", saturation, "the curve gives no finite PO2 at exactly 0 or 100 %"
    )


def impute_pao2_from_spo2(*, spo2: float) -> float:
    """PaO2 (mm[Hg]) imputed from a pulse-oximetry saturation (fraction), for SpO2 ≤ 96 %.

    The exact inverse of Severinghaus eq. 1 applied to SpO2; the nonlinear imputation of Brown SM
    et al., "Nonlinear imputation of PaO2/FIO2 from SpO2/FIO2 among patients with acute
    respiratory distress syndrome", Chest 2016;150:307–313, which restricted it to SpO2 ≤ 96 %.

    Raises:
        OutsideModelRangeError: SpO2 above 96 %, where the curve is too flat to impute.
        ImpossibleValueError: SpO2 not between 0 and 1.
    """
    require_possible("spo2", spo2, 0.0, 1.0, "1")
    require_in_model("spo2", spo2, 0.0, c.IMPUTATION_MAX_SPO2, "1", "PaO2 imputation from SpO2")
    return po2_from_saturation(saturation=spo2)
