"""Derived facts of oximetry: SpO2 against SaO2, exertional desaturation, S/F, imputed PaO2."""

from __future__ import annotations

from service.physiology import constants as c
from service.physiology import gas_exchange as gx
from service.physiology import saturation

from .derivation import Computed, DerivedTable

table = DerivedTable()
PERCENT = "%"


@table.quantity("spo2_sao2_difference", PERCENT, (-100.0, 100.0), 0, "SpO2 minus SaO2")
def spo2_sao2_difference(*, spo2: float, arterial_so2: float) -> float:
    return spo2 - arterial_so2


@table.quantity(
    "spo2_sao2_gap", PERCENT, (0.0, 100.0), 0, "Size of spo2_sao2_difference, whatever its sign"
)
def spo2_sao2_gap(*, spo2_sao2_difference: float) -> float:
    return abs(spo2_sao2_difference)


@table.quantity(
    "exertional_desaturation",
    PERCENT,
    (-100.0, 100.0),
    0,
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
    return Computed(
        saturation.impute_pao2_from_spo2(spo2=spo2),
        "exact inverse of the Severinghaus 1979 curve (Brown 2016), "
        f"SpO2 ≤ {c.IMPUTATION_MAX_SPO2 * 100:g} %",
    )


FACTS = tuple(table.facts)
