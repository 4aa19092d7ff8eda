"""Derived facts of oximetry: SpO2 against SaO2, exertional desaturation, S/F, imputed PaO2."""

from __future__ import annotations

from service.physiology import constants as c
from service.physiology import gas_exchange as gx
from service.physiology import saturation

from .derivation import Computed, DerivedTable

table = DerivedTable()
PERCENT = "%"


@table.quantity(
    "arterial_so2_functional",
    PERCENT,
    (0.0, 100.0),
    1,
    "Functional arterial saturation, O2Hb / (O2Hb + HHb): as the analyser gives it, or from the "
    "fractional oxyhaemoglobin divided by 1 − COHb − MetHb",
)
def arterial_so2_functional(
    *,
    arterial_so2: float | None = None,
    arterial_o2hb: float | None = None,
    carboxyhaemoglobin: float | None = None,
    methaemoglobin: float | None = None,
) -> float | None:
    if arterial_so2 is not None:
        return arterial_so2
    if arterial_o2hb is None or (carboxyhaemoglobin is None and methaemoglobin is None):
        # A fractional value without its dyshaemoglobins cannot be compared with SpO2.
        return None
    carrying = 1.0 - (carboxyhaemoglobin or 0.0) - (methaemoglobin or 0.0)
    return min(arterial_o2hb / carrying, 1.0) if carrying > 0.0 else None


@table.quantity(
    "spo2_sao2_difference",
    PERCENT,
    (-100.0, 100.0),
    1,
    "SpO2 minus the functional arterial saturation",
)
def spo2_sao2_difference(*, spo2: float, arterial_so2_functional: float) -> float:
    return spo2 - arterial_so2_functional


@table.quantity(
    "spo2_sao2_gap", PERCENT, (0.0, 100.0), 1, "Size of spo2_sao2_difference, whatever its sign"
)
def spo2_sao2_gap(*, spo2_sao2_difference: float) -> float:
    return abs(spo2_sao2_difference)


@table.quantity(
    "exertional_desaturation",
    PERCENT,
    (-100.0, 100.0),
    1,
    "Resting SpO2 minus exertional nadir",
)
def exertional_desaturation(
    *, spo2_exertional_baseline: float, spo2_exertional_nadir: float
) -> float:
    return spo2_exertional_baseline - spo2_exertional_nadir


@table.quantity("sf_ratio", "1", (0.0, 1000.0), 0, "SpO2 (%) / FiO2", result="sf-ratio")
def sf_ratio(*, spo2: float, fio2: float) -> Computed:
    return Computed(gx.sf_ratio(spo2=spo2, fio2=fio2), "SpO2 (%) / FiO2")


@table.quantity(
    "imputed_pao2",
    "mm[Hg]",
    (0.0, 1200.0),
    1,
    "PaO2 imputed from SpO2",
    result="imputed-pao2",
)
def imputed_pao2(*, spo2: float) -> Computed | None:
    if not 0.0 < spo2 <= c.IMPUTATION_MAX_SPO2:
        return None  # on the flat part of the curve (or no saturation): nothing to impute
    return Computed(saturation.impute_pao2_from_spo2(spo2=spo2), _IMPUTED_METHOD)


# Fixed numbers make a fixed text: written once at import, not on every call.
_IMPUTED_METHOD = (
    "exact inverse of the Severinghaus 1979 curve (Brown 2016), "
    f"SpO2 ≤ {c.IMPUTATION_MAX_SPO2 * 100:g} %"
)


@table.flag(
    "dlco_below_lower_limit",
    "The DLCO is below the lower limit of normal sent with it (referenceRange.low)",
)
def dlco_below_lower_limit(
    *,
    dlco: float | None = None,
    dlco_lower_limit: float | None = None,
    dlco_percent_predicted: float | None = None,
    dlco_percent_lower_limit: float | None = None,
) -> bool | None:
    if dlco is not None and dlco_lower_limit is not None:
        return dlco < dlco_lower_limit
    if dlco_percent_predicted is not None and dlco_percent_lower_limit is not None:
        return dlco_percent_predicted < dlco_percent_lower_limit
    return None


FACTS = tuple(table.facts)
