"""Derived facts of the PaO2 deficit: the fall below the healthy reference, split into causes.

``service.physiology.deficit`` does the arithmetic; here each part becomes a fact, and so
does its share. Two kinds of share, because two questions are asked:

* ``share_inspired`` — the inspired part as a fraction of everything that lowers the PaO2
  (credits left out): does the setting explain the low PaO2?
* ``share_ventilation``, ``share_gas_exchange`` — each as a fraction of what lowers the PaO2
  *beyond the setting* (ventilation, gas exchange and the unattributed rest): is this cause a
  meaningful part of what is wrong? Measured against the setting's own expected PaO2, a
  relative hypoventilation at altitude is not drowned by the altitude itself.

Without an arterial PO2, a PaO2 imputed from an SpO2 of 96 % or less stands in (labelled).
"""

from __future__ import annotations

from functools import lru_cache

from service.config import Settings
from service.physiology.bounds import PARTIAL_PRESSURE_MMHG
from service.physiology.deficit import DeficitPartition, partition_pao2_deficit

from .derivation import Computed, DerivedTable

table = DerivedTable()
MMHG = "mm[Hg]"
PERCENT = "%"
_DIFFERENCE = (-PARTIAL_PRESSURE_MMHG[1], PARTIAL_PRESSURE_MMHG[1])
_FRACTION = (0.0, 100.0)  # in the catalogue unit, %


@lru_cache(maxsize=32)
def _partition(
    pao2: float,
    age: float,
    fio2: float,
    pb: float,
    expected_paco2: float,
    paco2: float | None,
    ph2o: float,
    quotient: float,
) -> DeficitPartition:
    # Every part of one gas reads the same partition: computed once per set of inputs.
    return partition_pao2_deficit(
        arterial_po2_mmhg=pao2,
        age_years=age,
        fio2=fio2,
        barometric_mmhg=pb,
        expected_paco2_mmhg=expected_paco2,
        paco2_mmhg=paco2,
        water_vapour_mmhg=ph2o,
        respiratory_quotient=quotient,
    )


def _of(
    age: float,
    fio2: float,
    barometric_pressure: float,
    paco2_expected: float,
    water_vapour_pressure: float,
    settings: Settings,
    arterial_po2: float | None,
    imputed_pao2: float | None,
    arterial_pco2: float | None,
) -> DeficitPartition | None:
    pao2 = arterial_po2 if arterial_po2 is not None else imputed_pao2
    if pao2 is None:
        return None
    return _partition(
        pao2,
        age,
        fio2,
        barometric_pressure,
        paco2_expected,
        arterial_pco2 if arterial_po2 is not None else None,
        water_vapour_pressure,
        settings.respiratory_quotient,
    )


def _method_text(used: str) -> str:
    return (
        f"partition of the fall of {used} below the value expected for age (docs/clinical-logic.md)"
    )


# The two method texts, written once: which one depends only on whether the PaO2 was measured.
_MEASURED_METHOD = _method_text("PaO2")
_IMPUTED_METHOD = _method_text("PaO2 imputed from SpO2 (Brown 2016)")


def _method(arterial_po2: float | None) -> str:
    return _MEASURED_METHOD if arterial_po2 is not None else _IMPUTED_METHOD


@table.quantity(
    "pao2_fall",
    MMHG,
    _DIFFERENCE,
    1,
    "Expected PaO2 for age (sea level, air) minus the PaO2",
    result="pao2-fall",
)
def pao2_fall(
    *,
    age: float,
    fio2: float,
    barometric_pressure: float,
    paco2_expected: float,
    water_vapour_pressure: float,
    settings: Settings,
    arterial_po2: float | None = None,
    imputed_pao2: float | None = None,
    arterial_pco2: float | None = None,
) -> Computed | None:
    d = _of(
        age,
        fio2,
        barometric_pressure,
        paco2_expected,
        water_vapour_pressure,
        settings,
        arterial_po2,
        imputed_pao2,
        arterial_pco2,
    )
    return None if d is None else Computed(d.fall, _method(arterial_po2))


def _part(name: str, description: str, result: str, pick: str) -> None:
    def compute(
        *,
        age: float,
        fio2: float,
        barometric_pressure: float,
        paco2_expected: float,
        water_vapour_pressure: float,
        settings: Settings,
        arterial_po2: float | None = None,
        imputed_pao2: float | None = None,
        arterial_pco2: float | None = None,
    ) -> Computed | None:
        d = _of(
            age,
            fio2,
            barometric_pressure,
            paco2_expected,
            water_vapour_pressure,
            settings,
            arterial_po2,
            imputed_pao2,
            arterial_pco2,
        )
        if d is None:
            return None
        value: float | None = getattr(d, pick)
        return None if value is None else Computed(value, _method(arterial_po2))

    compute.__name__ = name
    table.quantity(name, MMHG, _DIFFERENCE, 1, description, result=result)(compute)


_part(
    "deficit_inspired",
    "Part of the fall due to the setting: inspired PO2 (altitude, FiO2), the PaCO2 expected "
    "there and the normal A-a gradient at that alveolar PO2 (negative: an oxygen credit)",
    "deficit-inspired",
    "inspired",
)
_part(
    "deficit_ventilation",
    "Part of the fall due to PaCO2 above (negative: below) the value expected for the setting",
    "deficit-ventilation",
    "ventilation",
)
_part(
    "deficit_gas_exchange",
    "Part of the fall due to an A-a gradient above the normal for age at this alveolar PO2",
    "deficit-gas-exchange",
    "gas_exchange",
)
_part(
    "deficit_unattributed",
    "Part of the fall that cannot be attributed (ventilation and gas exchange without a PaCO2)",
    "deficit-unattributed",
    "unattributed",
)


def _positive(*parts: float | None) -> float:
    return sum(p for p in parts if p is not None and p > 0.0)


@table.quantity(
    "share_inspired", PERCENT, _FRACTION, 0, "Inspired part as a share of what lowers the PaO2"
)
def share_inspired(
    *,
    deficit_inspired: float,
    deficit_unattributed: float,
    deficit_ventilation: float | None = None,
    deficit_gas_exchange: float | None = None,
) -> float | None:
    gross = _positive(
        deficit_inspired, deficit_ventilation, deficit_gas_exchange, deficit_unattributed
    )
    return max(deficit_inspired, 0.0) / gross if gross > 0.0 else None


@table.quantity(
    "share_ventilation",
    PERCENT,
    _FRACTION,
    0,
    "Ventilation part as a share of what lowers the PaO2 beyond the setting",
)
def share_ventilation(
    *, deficit_ventilation: float, deficit_gas_exchange: float, deficit_unattributed: float
) -> float | None:
    beyond = _positive(deficit_ventilation, deficit_gas_exchange, deficit_unattributed)
    return max(deficit_ventilation, 0.0) / beyond if beyond > 0.0 else None


@table.quantity(
    "share_gas_exchange",
    PERCENT,
    _FRACTION,
    0,
    "Gas-exchange part as a share of what lowers the PaO2 beyond the setting",
)
def share_gas_exchange(
    *, deficit_ventilation: float, deficit_gas_exchange: float, deficit_unattributed: float
) -> float | None:
    beyond = _positive(deficit_ventilation, deficit_gas_exchange, deficit_unattributed)
    return max(deficit_gas_exchange, 0.0) / beyond if beyond > 0.0 else None


FACTS = tuple(table.facts)
